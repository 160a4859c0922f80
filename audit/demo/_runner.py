"""The demo runner: writes the demo scenario's files and runs it end to end.

The demo runs the real `sortition` commands, as a user would type them, on
the invented language-learning scenario of configs_example/: assign a few learners,
check the configs, catch two bad changes before they ship, show the free
traffic, then write two weeks of exposure logs with a planted fault and let
the audit find, localise and explain it. Every step checks its exit code, and
the runner says whether every step behaved as it should.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

from typing import Callable

from .._errors import AuditError
from ._logs import write_demo_logs

# Edits to configs_example/lessons.yaml that make the two bad changes of the story.
OVERLAP_EDIT = ('buckets: ["4000-5999"]', 'buckets: ["3500-5999"]')
REWEIGHT_EDIT = ("            weight: 50\n            params: {lesson_minutes: 10}\n          - name: short\n            weight: 50",
                 "            weight: 60\n            params: {lesson_minutes: 10}\n          - name: short\n            weight: 40")


@dataclass
class Step:
    title: str
    args: list[str]
    expect: int
    why: str


def _run(step: Step, number: int, total: int, echo: Callable[[str], None]) -> subprocess.CompletedProcess:
    shown = " ".join(a if " " not in a else repr(a) for a in step.args)
    echo(f"\n== {number}/{total} {step.title}\n   {step.why}\n\n$ sortition {shown}")
    done = subprocess.run([sys.executable, "-m", "audit", *step.args], capture_output=True, text=True)
    output = done.stdout if done.stdout.strip() else done.stderr
    echo(output.rstrip())
    verdict = "as expected" if done.returncode == step.expect else f"UNEXPECTED, wanted {step.expect}"
    echo(f"[exit {done.returncode}: {verdict}]")
    return done


def _changed_copy(configs: Path, target: Path, edit: tuple[str, str]) -> Path:
    if target.exists():
        shutil.rmtree(target)
    shutil.copytree(configs, target)
    lessons = target / "lessons.yaml"
    text = lessons.read_text(encoding="utf-8")
    if edit[0] not in text:
        raise AuditError(f"{lessons}: the demo expects configs_example's lessons.yaml; it has been edited")
    lessons.write_text(text.replace(edit[0], edit[1], 1), encoding="utf-8")
    return target


def run_demo(configs: Path, out: Path, learners: int, days: int, seed: int,
             echo: Callable[[str], None] = print) -> bool:
    """Write the demo's changed configs and invented logs into `out`, run each step; True when all behaved."""
    if not configs.is_dir():
        raise AuditError(f"{configs}: no such directory; run the demo from the repository top, or give its configs")

    out.mkdir(parents=True, exist_ok=True)
    overlap = _changed_copy(configs, out / "change-overlap", OVERLAP_EDIT)
    reweight = _changed_copy(configs, out / "change-reweight", REWEIGHT_EDIT)
    logs = write_demo_logs(configs, out / "logs", seed=seed, learners=learners, days=days)
    report = out / "srm-report.html"
    audit_args = ["srm", str(out / "logs"), "--config", str(configs), "--by", "country,platform,app_version"]
    steps = [
        Step("Assign", ["assign", str(configs), "--unit", "L-1042", "--unit-type", "learner",
                        "--attr", "country=NL", "--attr", "app_version=7.4.0"], 0,
             "What a service embedding the SDK gives one learner: layer by layer, with buckets and parameters."),
        Step("Check the configs, as CI does", ["check", str(configs)], 0,
             "The configs as they are in the repository: no errors."),
        Step("A change that would share traffic", ["check", str(overlap)], 1,
             "A pull request widens review-first to 3500-5999, into shorter-lessons' buckets; CI names the line."),
        Step("A change that would move learners between arms", ["diff", str(configs), str(reweight)], 1,
             "Another one re-weights the running shorter-lessons 50/50 -> 60/40; diff counts who would switch."),
        Step("Where is free traffic", ["layout", str(configs), "--layer", "paywall", "--want", "10"], 0,
             "Each layer's 10,000 buckets: who owns what, and a free range for a new 10 % experiment."),
        Step("Audit two weeks of exposure logs", audit_args, 1,
             f"{logs.records:,} invented exposure records of {logs.units:,} units, with a fault planted somewhere."),
        Step("The same audit as a report to share", audit_args + ["--format", "html", "--out", str(report)], 1,
             "A single HTML file that opens offline in any browser."),
    ]
    results = [_run(step, i, len(steps), echo) for i, step in enumerate(steps, start=1)]
    audit_json = subprocess.run([sys.executable, "-m", "audit", *audit_args, "--format", "json"],
                                capture_output=True, text=True)
    found = _fault_found(audit_json.stdout, logs.fault)
    echo(f"\n== Planted: {_describe(logs.fault)}")
    echo(f"== Found by the audit: {'yes, localised to the same segment' if found else 'NO'}")
    echo(f"== Report: {report}")
    ok = found and all(r.returncode == s.expect for r, s in zip(results, steps))
    return ok


def _describe(fault: dict | None) -> str:
    if not fault:
        return "no fault"
    where = ", ".join(f"{k}={v}" for k, v in fault["segment"].items())
    return f"exposures of arm '{fault['arm']}' of {fault['experiment']} dropped in {where} since {fault['since']}"


def _fault_found(audit_stdout: str, fault: dict | None) -> bool:
    try:
        report = json.loads(audit_stdout)
    except json.JSONDecodeError:
        return False
    for result in report.get("results", []):
        if fault and result.get("experiment") == fault["experiment"] and result.get("srm"):
            localised = (result.get("localised") or {}).get("by", {})
            return localised == fault["segment"]
    return False
