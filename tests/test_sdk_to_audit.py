"""The two halves together: exposures written by the SDK's own sink are what the audit reads."""

import json
import subprocess
import sys
from datetime import date

from bucketing import Assigner, JsonLinesSink

COUNTRIES = ["NL", "BE", "DE", "FR", "BR", "US"]


def test_sdk_exposure_file_audits_clean_and_counts_every_unit(example_dir, tmp_path):
    log = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(log)
    assigner = Assigner(example_dir, sink=sink)
    for i in range(12_000):
        attrs = {"country": COUNTRIES[i % 6], "app_version": "7.4.0", "platform": ["ios", "web"][i % 2]}
        got = assigner.assign({"learner": f"int-{i}"}, attrs, day=date(2026, 12, 1))
        got.param("lesson_minutes")
        got.param("audio_engine")
    sink.close()
    records = [json.loads(line) for line in log.read_text(encoding="utf-8").splitlines()]
    # Plain-Python count of distinct units per experiment (outside check: no DuckDB involved).
    expected_units = {}
    for r in records:
        if not r["forced"]:
            expected_units.setdefault(r["experiment"], set()).add(r["unit"])

    done = subprocess.run([sys.executable, "-m", "audit", "srm", str(log), "--config", str(example_dir),
                           "--by", "country", "--format", "json", "--quiet"], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr
    report = json.loads(done.stdout)
    got_units = {r["experiment"]: r["units"] for r in report["results"]}
    assert got_units == {name: len(units) for name, units in expected_units.items()}
    for result in report["results"]:
        assert result["srm"] is False and result["duplicate_records"] == 0 and result["multi_arm_units"] == 0
        assert result["replay_mismatch_share"] == 0
    assert report["malformed"]["total"] == 0
