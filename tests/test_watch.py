"""ConfigWatcher: reloads settled changes, keeps the last good config, never loads a torn file (invented configs)."""

import logging
import threading
import time
from pathlib import Path

from bucketing import Assigner, ConfigWatcher, load_config
from tests.conftest import SMALL

# The shared small config (tests/conftest.py) with its holdout salt to fill in: each salt is another version.
CONFIG = SMALL.replace("{", "{{").replace("}", "}}").replace("salt: small-holdout", "salt: {salt}")


def version_of(text: str) -> str:
    return load_config(Path("x.yaml"), text=text).version


def write(path: Path, text: str) -> None:
    path.write_text(text, encoding="utf-8")


class RecordingAssigner(Assigner):
    """An Assigner that remembers every version it was reloaded to."""

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.loaded: list[str] = []

    def reload(self, config) -> str:
        version = super().reload(config)
        self.loaded.append(version)
        return version


def test_poll_reloads_a_changed_file_and_says_so(tmp_path, caplog):
    path = tmp_path / "config.yaml"
    write(path, CONFIG.format(salt="one"))
    assigner = Assigner(path)
    watcher = ConfigWatcher(assigner, path, settle=0)
    first = watcher.poll()
    assert first is not None and first.ok and first.message.startswith("unchanged")
    assert watcher.poll() is None, "nothing changed since the last look"
    write(path, CONFIG.format(salt="two"))
    with caplog.at_level(logging.INFO, logger="bucketing.watch"):
        attempt = watcher.poll()
    assert attempt is not None and attempt.ok and attempt.version == version_of(CONFIG.format(salt="two"))
    assert assigner.version == attempt.version == watcher.last_attempt.version and watcher.reloads == 1
    assert attempt.at.tzinfo is not None
    assert any("reloaded" in r.getMessage() for r in caplog.records)


def test_a_bad_config_is_rejected_once_and_the_good_one_keeps_serving(tmp_path, caplog):
    path = tmp_path / "config.yaml"
    write(path, CONFIG.format(salt="one"))
    assigner = Assigner(path)
    good = assigner.version
    watcher = ConfigWatcher(assigner, path, settle=0)
    write(path, CONFIG.format(salt="one").replace("weight: 100", "weight: 90"))
    with caplog.at_level(logging.WARNING, logger="bucketing.watch"):
        attempt = watcher.poll()
        assert watcher.poll() is None
    assert attempt is not None and not attempt.ok and attempt.version == good
    assert "config.yaml" in attempt.message and "rejected" in attempt.message
    assert assigner.version == good and watcher.rejections == 1
    assert [r.levelname for r in caplog.records] == ["WARNING"]
    write(path, CONFIG.format(salt="three"))
    assert watcher.poll().ok and assigner.version == version_of(CONFIG.format(salt="three"))


def test_a_deleted_file_is_a_rejection_not_a_crash(tmp_path):
    path = tmp_path / "config.yaml"
    write(path, CONFIG.format(salt="one"))
    assigner = Assigner(path)
    watcher = ConfigWatcher(assigner, path, settle=0)
    path.unlink()
    attempt = watcher.poll()
    assert attempt is not None and not attempt.ok and assigner.version == version_of(CONFIG.format(salt="one"))


def test_a_folder_is_watched_file_by_file(tmp_path):
    folder = tmp_path / "configs"
    folder.mkdir()
    write(folder / "a.yaml", CONFIG.format(salt="one"))
    assigner = Assigner(folder)
    watcher = ConfigWatcher(assigner, folder, settle=0)
    watcher.poll()
    write(folder / "b.yaml", "format: 1\nlayers:\n  - {name: other, unit: device}\n")
    assert watcher.poll().ok and {layer.name for layer in assigner.config.layers} == {"flow", "other"}
    (folder / "b.yaml").unlink()
    assert watcher.poll().ok and [layer.name for layer in assigner.config.layers] == ["flow"]


def test_a_file_that_changes_while_settling_is_not_loaded(tmp_path):
    path = tmp_path / "config.yaml"
    write(path, CONFIG.format(salt="one"))
    assigner = RecordingAssigner(path)

    class WriterMidway(ConfigWatcher):
        """The writer adds a chunk during the settle wait, as a slow in-place rewrite would."""

        def _wait_to_settle(self) -> bool:
            with open(path, "a", encoding="utf-8") as file:
                file.write("# more to come\n")
            return True

    watcher = WriterMidway(assigner, path, settle=0)
    write(path, CONFIG.format(salt="tw"))  # a salt cut short: valid YAML, the wrong config
    assert watcher.poll() is None and assigner.loaded == []


def test_a_watcher_that_fails_inside_reports_it_and_keeps_going(tmp_path):
    path = tmp_path / "config.yaml"
    write(path, CONFIG.format(salt="one"))

    class Broken(Assigner):
        def reload(self, config) -> str:
            raise RuntimeError("swap failed")

    assigner = Broken(path)
    watcher = ConfigWatcher(assigner, path, settle=0)
    write(path, CONFIG.format(salt="two"))
    attempt = watcher.poll()
    assert attempt is not None and not attempt.ok and "swap failed" in attempt.message


def test_thread_polls_until_stopped(tmp_path):
    path = tmp_path / "config.yaml"
    write(path, CONFIG.format(salt="one"))
    assigner = Assigner(path)
    with ConfigWatcher(assigner, path, interval=0.01, settle=0.01) as watcher:
        write(path, CONFIG.format(salt="two"))
        deadline = time.monotonic() + 10
        while assigner.version != version_of(CONFIG.format(salt="two")) and time.monotonic() < deadline:
            time.sleep(0.01)
    assert assigner.version == version_of(CONFIG.format(salt="two"))
    assert not watcher._thread.is_alive()
    write(path, CONFIG.format(salt="three"))
    assert watcher.poll().ok, "poll works after stop"


def test_rewrite_in_place_race_never_loads_a_torn_file(tmp_path):
    """A writer rewrites the file in place, slowly, chunk by chunk; the watcher polls all the while.

    Each version starts with a long holdout salt, and many cuts of a
    half-written file are valid configs (a salt cut short, a holdout and no
    layers, a percent of 1 for 10): a watcher that loads one would reshuffle
    units. Every version loaded must be a complete one.
    """
    path = tmp_path / "config.yaml"
    texts = [CONFIG.format(salt=f"v{n}-" + "s" * 150) for n in range(6)]
    complete = {version_of(t) for t in texts}
    write(path, texts[0])
    assigner = RecordingAssigner(path)
    done = threading.Event()

    def writer() -> None:
        for text in texts[1:]:
            with open(path, "w", encoding="utf-8") as file:
                for start in range(0, len(text), 16):
                    file.write(text[start:start + 16])
                    file.flush()
                    time.sleep(0.002)
            time.sleep(0.6)  # longer than `settle`: each complete version can be loaded
        done.set()

    thread = threading.Thread(target=writer)
    with ConfigWatcher(assigner, path, interval=0.005, settle=0.4) as watcher:  # 200 times the writer's pause between chunks
        thread.start()
        done.wait(60)
        deadline = time.monotonic() + 10
        while assigner.version != version_of(texts[-1]) and time.monotonic() < deadline:
            time.sleep(0.02)
    thread.join()
    assert len(set(assigner.loaded)) >= 2, "the watcher loaded complete versions along the way"
    assert set(assigner.loaded) <= complete, "a torn file was loaded"
    assert assigner.version == version_of(texts[-1])
    assert watcher.reloads == len(assigner.loaded)
