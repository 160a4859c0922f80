"""`sortition assign --explain` through the real command line: every reason, text and JSON, as the SDK says."""

import json
import subprocess
import sys
from datetime import date
from pathlib import Path

from bucketing import (AfterEnd, Assigned, Assigner, BeforeStart, Forced, HeldOut, NoExperiment, NotEligible,
                       NotRunning, bucket_of, load_config)
from tests.test_explain import EVERY_REASON
from tests.test_spec_coverage import DATA_KEYED, assert_described

SORTITION = str(Path(sys.executable).with_name("sortition"))


def run(*args: str | Path, stdin: str | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([SORTITION, *map(str, args)], input=stdin, capture_output=True, text=True, timeout=60)


def first(predicate) -> str:
    return next(f"c-{i}" for i in range(100_000) if predicate(f"c-{i}"))


def units_for_every_reason() -> str:
    """A CSV of units (invented), one per reason of the EVERY_REASON config on 2026-11-09."""
    free = lambda u: bucket_of("small-holdout", u) >= 1000  # noqa: E731
    flow = lambda u: bucket_of("flow", u)  # noqa: E731
    rows = [
        ("qa-1", "NL", "7.4"),
        (first(lambda u: not free(u)), "NL", "7.4"),
        (first(lambda u: free(u) and flow(u) >= 6000), "NL", "7.4"),
        (first(lambda u: free(u) and 2000 <= flow(u) < 4000), "NL", "7.4"),
        (first(lambda u: free(u) and 4000 <= flow(u) < 6000), "NL", "7.4"),
        (first(lambda u: free(u) and flow(u) < 2000), "US", "7.4"),
        (first(lambda u: free(u) and flow(u) < 2000 and u != "c-0"), "BE", "7.4"),
    ]
    return "unit,country,app_version\n" + "".join(f"{u},{c},{v}\n" for u, c, v in rows)


def test_every_reason_in_json_is_what_the_sdk_explains(tmp_path):
    config = tmp_path / "flow.yaml"
    config.write_text(EVERY_REASON)
    units = units_for_every_reason()
    reasons = set()
    for day in ("2026-11-09", "2026-11-21"):
        out = run("assign", config, "--units", "-", "--explain", "--format", "json", "--day", day, stdin=units)
        assert out.returncode == 0, out.stderr
        assigner = Assigner(load_config(config))
        lines = [json.loads(line) for line in out.stdout.splitlines()]
        for (unit, country, version), got in zip([r.split(",") for r in units.splitlines()[1:]], lines):
            expected = assigner.explain({"learner": unit}, {"country": country, "app_version": version},
                                        day=date.fromisoformat(day))
            assert got == expected.to_dict()
            reasons.add(got["layers"]["flow"]["reason"])
    every = (Forced, HeldOut, NoExperiment, NotRunning, BeforeStart, AfterEnd, NotEligible, Assigned)
    assert reasons == {step.reason for step in every}  # test_explain checks these are all the reasons there are


def test_text_says_what_decided_each_layer(example_dir):
    out = run("assign", example_dir, "--unit", "L-00002", "--unit-type", "learner", "--attr", "country=US",
              "--attr", "app_version=7.4", "--day", "2026-11-20", "--explain")
    assert out.returncode == 0, out.stderr
    expected = Assigner(example_dir).explain({"learner": "L-00002"}, {"country": "US", "app_version": "7.4"},
                                             day=date(2026, 11, 20))
    assert out.stdout == expected.to_text() + "\n"
    assert "paywall       bucket 4592  not eligible for trial-length: country is US, rule in [NL, BE, DE, FR, BR]" \
        in out.stdout


def test_explain_does_not_print_csv(example_dir):
    out = run("assign", example_dir, "--unit", "L-1", "--unit-type", "learner", "--explain", "--format", "csv")
    assert out.returncode == 2 and out.stderr.strip() == "sortition: --explain prints text or json, not csv"


def test_help_documents_explain():
    out = run("assign", "--help")
    assert "--explain" in out.stdout and "eligibility" in out.stdout


def test_explain_json_fields_are_specified(tmp_path, monkeypatch):
    config = tmp_path / "flow.yaml"
    config.write_text(EVERY_REASON)
    plain = run("assign", config, "--unit", "qa-1", "--format", "json")
    outputs = [json.loads(plain.stdout)]  # the section's first table is the plain result's
    for day in ("2026-11-09", "2026-11-21"):
        out = run("assign", config, "--units", "-", "--explain", "--format", "json", "--day", day,
                  stdin=units_for_every_reason())
        outputs += [json.loads(line) for line in out.stdout.splitlines()]
    monkeypatch.setitem(DATA_KEYED, "assign", DATA_KEYED["assign"] | {"units", "holdouts"})
    assert_described("assign", outputs)
