"""Reports: the text table puts the mismatch first, and the HTML file renders offline in a real browser."""

import json
import re
from datetime import date, timedelta
import shutil
import subprocess

from audit.render import as_json, srm_text
from audit.render.html_report import srm_html

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def test_text_report_lists_the_mismatch_first_with_its_cause(demo):
    _, result = demo
    text = srm_text(result)
    first = text.split("\n\n")[1]
    assert first.startswith("MISMATCH  lesson-flow / shorter-lessons")
    assert "localised to country=BR" in first and "exposures of 'short'" in first
    assert "malformed records (left out): " in text


def test_the_demo_fault_is_dated_on_the_day_it_was_planted(demo):
    """The demo plants its fault from `logs.fault["since"]`; the onset (in the localised segment, where the fault
    is) must be that day, within one day, and the crossing day comes no earlier."""
    logs, result = demo
    faulty = result.results[0]
    planted = date.fromisoformat(logs.fault["since"])
    onset_day, (low, high), where = faulty.break_estimate()
    assert abs(onset_day - planted) <= timedelta(1) and low <= onset_day <= high
    assert where is not None and "country=BR" in where
    assert faulty.first_srm_day is not None and faulty.first_srm_day >= onset_day
    assert f"on {onset_day.isoformat()}" in srm_text(result)


def test_json_keeps_the_contract_types(demo):
    _, result = demo
    data = json.loads(as_json(result))
    faulty = data["results"][0]
    assert isinstance(faulty["first_srm_day"], str) and faulty["srm"] is True
    # the demo's faulty arm loses exposures, it is not served a wrong arm: the replay (a sample of at most
    # 20,000 units, as the fixture asks) finds every unit in the arm the config gives it
    assert faulty["replay_checked"] == min(20_000, faulty["units"]) and faulty["replay_mismatch_share"] == 0.0
    assert faulty["localised"]["by"] == {"country": "BR", "app_version": "7.3.0", "platform": "android"}


def test_html_is_self_contained(demo):
    _, result = demo
    page = srm_html(result)
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:)?//""", page)
    assert "@import" not in page and "url(" not in page


def test_html_renders_in_headless_chromium(demo, tmp_path):
    assert CHROMIUM, "chromium is needed for this test (make test installs it: scripts/system-tools.sh)"
    _, result = demo
    page = tmp_path / "srm.html"
    page.write_text(srm_html(result), encoding="utf-8")
    shot = tmp_path / "srm.png"
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={tmp_path / 'profile'}"]
    dom = subprocess.run([CHROMIUM, *flags, "--dump-dom", page.as_uri()], capture_output=True, text=True,
                         timeout=90, check=True).stdout
    sections = re.findall(r'<section class="exp( srm)?"', dom)
    assert len(sections) == len(result.results) and sections[0] == " srm"
    assert dom.count("<svg") >= 2 * len(result.results)
    assert "first below the threshold on <b>" in dom
    onset_day = result.results[0].break_estimate()[0]
    assert f"on <b>{onset_day.isoformat()}</b>" in dom and dom.count('class="onset"') == 1  # only the mismatch
    assert dom.count('class="bad day"') >= 1
    subprocess.run([CHROMIUM, *flags, "--window-size=1200,900", f"--screenshot={shot}", page.as_uri()],
                   capture_output=True, timeout=90, check=True)
    assert shot.stat().st_size > 20_000
