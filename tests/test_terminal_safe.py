"""Text output of check, diff and layout never passes a control character from a config or a file name to the terminal.

The payloads are the usual terminal escape sequences (invented for the
test): ESC [2J clears the screen, ESC ]0;...BEL sets the window title.
"""

import shutil

import pytest

from audit.render import terminal_safe
from tests.conftest import EXAMPLE

CLEAR = "\x1b[2J"
TITLE = "\x1b]0;owned\x07"


def _raw_controls(text: str) -> list[str]:
    return [c for c in text if not c.isprintable() and c != "\n"]


@pytest.mark.parametrize("raw, shown", [
    (CLEAR, "\\x1b[2J"),
    (TITLE, "\\x1b]0;owned\\x07"),
    ("tab\there\r", "tab\\x09here\\x0d"),
    ("bidi \u202e and next line\n", "bidi \\u202e and next line\n"),
    ("plain text, accents é and 学", "plain text, accents é and 学"),
])
def test_control_characters_are_written_as_escapes(raw, shown):
    assert terminal_safe(raw) == shown


def test_check_escapes_a_file_name_with_an_escape_sequence(sortition, tmp_path):
    hostile = tmp_path / f"paywall{TITLE}.yaml"
    hostile.write_text((EXAMPLE / "paywall.yaml").read_text().replace("status: running", "status: runing", 1))
    got = sortition("check", hostile)
    assert got.exit_code == 2 or got.exit_code == 1
    assert not _raw_controls(got.stdout) and "paywall\\x1b]0;owned\\x07.yaml" in got.stdout


def test_diff_escapes_the_text_of_an_approval(sortition, tmp_path):
    shutil.copytree(EXAMPLE, tmp_path / "old")
    shutil.copytree(EXAMPLE, tmp_path / "new")
    audio = tmp_path / "new" / "audio.yaml"
    audio.write_text(audio.read_text().replace("weight: 20", "weight: 30").replace("weight: 80", "weight: 70")
                     .replace("owner: platform-team", 'owner: platform-team\n        reassign_ok: "ok\\e[2J\\a"'))
    got = sortition("diff", tmp_path / "old", tmp_path / "new")
    assert got.exit_code == 0
    assert not _raw_controls(got.stdout) and "ok\\x1b[2J\\x07" in got.stdout


def test_layout_text_has_no_control_characters(sortition):
    got = sortition("layout", EXAMPLE)
    assert got.exit_code == 0 and got.stdout.strip() and not _raw_controls(got.stdout)
