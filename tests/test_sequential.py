"""The anytime-valid sequential SRM test: its error rate under daily peeking, and in the audit's JSON."""

import math
import random

from scipy import stats

from audit.srm import cumulative_tests, first_crossing, sequential_p_values, split_test


def test_daily_peeking_keeps_its_error_rate_where_a_repeated_fixed_test_does_not():
    # Ville's inequality bounds the chance that an anytime-valid p-value ever drops below
    # alpha by alpha; a chi-square test looked at every day has no such bound (common practice, no source).
    rng = random.Random(11)
    alpha, runs, days = 0.05, 300, 30
    sequential_hits = repeated_hits = 0
    for _ in range(runs):
        daily = []
        for _ in range(days):
            n = 400
            a = sum(1 for _ in range(n) if rng.random() < 0.5)
            daily.append([a, n - a])
        if first_crossing(sequential_p_values(daily, [0.5, 0.5]), alpha) is not None:
            sequential_hits += 1
        if first_crossing([f.p_value for f in cumulative_tests(daily, [0.5, 0.5])], alpha) is not None:
            repeated_hits += 1
    upper = stats.binom.ppf(0.999, runs, alpha) / runs
    assert sequential_hits / runs <= upper
    assert repeated_hits > sequential_hits


def test_a_real_mismatch_is_found():
    # Kohavi, Tang & Xu, Trustworthy Online Controlled Experiments (2020): 821,588 vs 815,482
    # in a 50/50 test is a sample ratio mismatch; the sequential test agrees at 0.0005.
    daily = [[821_588 // 7, 815_482 // 7]] * 7
    assert sequential_p_values(daily, [0.5, 0.5])[-1] < 0.0005
    assert split_test([821_588, 815_482], [0.5, 0.5]).p_value < 0.0005


def test_audit_reports_the_anytime_valid_test_per_day(tmp_path):
    # End to end: daily counts drift away from 50/50; the report carries the sequential
    # p-values, never rising, and the last one equals the pure function on the same counts.
    import json
    import subprocess
    import sys
    from datetime import date, timedelta

    rng = random.Random(5)
    lines, daily = [], []
    for day in range(10):
        counts = [0, 0]
        for i in range(600):
            arm = 0 if rng.random() < (0.5 if day < 4 else 0.56) else 1
            counts[arm] += 1
            ts = (date(2026, 11, 3) + timedelta(day)).isoformat() + "T12:00:00Z"
            lines.append(json.dumps({"ts": ts, "unit": f"d{day}-{i}", "unit_type": "u", "layer": "l",
                                     "experiment": "e", "arm": ["a", "b"][arm], "forced": False}))
        daily.append(counts)
    log = tmp_path / "x.jsonl"
    log.write_text("\n".join(lines) + "\n")
    done = subprocess.run([sys.executable, "-m", "audit", "srm", str(log), "--expect", "a=50,b=50",
                           "--format", "json", "--quiet"], capture_output=True, text=True)
    result = json.loads(done.stdout)["results"][0]
    series = [d["sequential_p_value"] for d in result["days"]]
    assert all(b <= a for a, b in zip(series, series[1:]))
    assert math.isclose(result["sequential_p_value"], sequential_p_values(daily, [0.5, 0.5])[-1], rel_tol=1e-9)
