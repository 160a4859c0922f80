"""Reload under load: threads keep assigning while configs, good and bad, are swapped in."""

import threading
from pathlib import Path

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
BAD = GOOD.format(name="bad").replace("weight: 100", "weight: 90")


def test_threads_see_whole_configs_only_and_never_fail():
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
            name = versions.get(got.config)
            la = got.layers.get("l")
            if name is None or la is None or la.experiment != name or got.params != {"version": name}:
                problems.append(f"mixed result: {got!r} under {got.config}")
            seen.add(name)
            i += 1

    threads = [threading.Thread(target=worker, args=(k,)) for k in range(4)]
    for t in threads:
        t.start()
    rejected = 0
    for round_ in range(300):
        if round_ % 3 == 2:
            try:
                assigner.reload(Path("bad.yaml")) if round_ % 2 else load_config(Path("bad.yaml"), text=BAD)
            except ConfigError:
                rejected += 1
        else:
            assigner.reload(configs[round_ % 3])
    stop.set()
    for t in threads:
        t.join()
    assert problems == []
    assert rejected == 100
    assert seen >= {"one", "two"}
    assert sum(assigner.errors.values()) == 0
