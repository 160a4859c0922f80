"""Reload under load: threads keep assigning while configs, good and bad, are swapped in.

The bad configs are real files that fail to load for different reasons; a
rejected reload must leave the config that was serving in place.
"""

import threading
from pathlib import Path

import pytest

from bucketing import Assigner, ConfigError, load_config

GOOD = """\
format: 1
layers:
  - name: l
    unit: u
    experiments:
      - name: {name}
        status: running
        buckets: ["0-9999"]
        arms:
          - {{name: {name}-arm, weight: 100, params: {{version: {name}}}}}
"""
INVALID = {
    "weights-sum-90": GOOD.format(name="bad").replace("weight: 100", "weight: 90"),
    "yaml-syntax": GOOD.format(name="bad").replace("layers:", "layers: [", 1),
    "overlap": GOOD.format(name="bad") + """\
      - name: bad-too
        status: running
        buckets: ["9000-9999"]
        arms:
          - {name: x, weight: 100}
""",
    "unknown-key": GOOD.format(name="bad").replace("status: running", "status: running\n        colour: red"),
    "truncated": GOOD.format(name="bad")[: len(GOOD) // 2],
    "empty": "",
}


@pytest.fixture
def invalid_files(tmp_path) -> list[Path]:
    paths = []
    for name, text in INVALID.items():
        path = tmp_path / f"{name}.yaml"
        path.write_text(text, encoding="utf-8")
        paths.append(path)
    return paths


def test_each_invalid_file_is_refused_and_the_old_config_keeps_serving(invalid_files):
    assigner = Assigner(load_config(Path("one.yaml"), text=GOOD.format(name="one")))
    before = assigner.version
    for path in invalid_files:
        with pytest.raises(ConfigError) as caught:
            assigner.reload(path)
        assert str(path) in str(caught.value)
        assert assigner.version == before
        assert assigner.assign({"u": "x"}).params == {"version": "one"}


def test_a_folder_with_one_bad_file_is_refused_whole(tmp_path):
    folder = tmp_path / "configs"
    folder.mkdir()
    (folder / "a.yaml").write_text(GOOD.format(name="two"))
    assigner = Assigner(load_config(Path("one.yaml"), text=GOOD.format(name="one")))
    (folder / "b.yaml").write_text(INVALID["unknown-key"].replace("name: l\n", "name: other\n"))
    with pytest.raises(ConfigError):
        assigner.reload(folder)
    assert assigner.assign({"u": "x"}).params == {"version": "one"}


def test_threads_see_whole_configs_only_and_never_fail(invalid_files):
    configs = [load_config(Path(f"{n}.yaml"), text=GOOD.format(name=n)) for n in ("one", "two", "three")]
    versions = {c.version: c.layers[0].experiments[0].name for c in configs}
    assigner = Assigner(configs[0])
    stop = threading.Event()
    problems: list[str] = []
    seen: set[str] = set()

    def worker(k: int) -> None:
        i = 0
        while not stop.is_set():
            got = assigner.assign({"u": f"w{k}-{i}"})
            name = versions.get(got.config_version)
            la = got.layers.get("l")
            if name is None or la is None or la.experiment != name or got.params != {"version": name}:
                problems.append(f"mixed result: {got!r} under {got.config_version}")
            seen.add(name)
            i += 1

    threads = [threading.Thread(target=worker, args=(k,)) for k in range(4)]
    for t in threads:
        t.start()
    rejected = 0
    for round_ in range(300):
        if round_ % 3 == 2:
            serving = assigner.version
            try:
                assigner.reload(invalid_files[round_ % len(invalid_files)])
            except ConfigError:
                rejected += 1
            assert assigner.version == serving
        else:
            assigner.reload(configs[round_ % 3])
    stop.set()
    for t in threads:
        t.join()
    assert problems == []
    assert rejected == 100
    assert seen >= {"one", "two"}
    assert sum(assigner.errors.values()) == 0
