"""Error rates of the SRM statistics on simulated clean and broken logs (fixed seeds; long runs in `make bench`)."""

import pytest
from scipy import stats

from audit.srm import DEFAULT_THRESHOLD
from tests.srm_simulations import duplicate_cause_fires, segment_alarms

DESIGNS = [(0.5, 0.5), (0.9, 0.1), (0.99, 0.01), (0.34, 0.33, 0.33), (0.8, 0.1, 0.1), (0.98, 0.01, 0.01)]
IDS = ["50/50", "90/10", "99/1", "34/33/33", "80/10/10", "98/1/1"]


@pytest.mark.parametrize("shares", DESIGNS, ids=IDS)
def test_clean_logs_with_200_segments_keep_the_family_wise_rate(shares):
    # Clean logs, 200 segments each, Holm across them: the share of logs with any segment alarm stays within
    # the threshold plus Monte Carlo error (binomial 99.9 % quantile, scipy.stats.binom.ppf); the same at a
    # family level of 5 %, where the bound has power to catch an anti-conservative test. 2,000 logs per design.
    runs, loose_runs = 2000, 500
    alarms = segment_alarms(shares, runs, DEFAULT_THRESHOLD, seed=11)[:, 0].sum()
    assert alarms <= stats.binom.ppf(0.999, runs, DEFAULT_THRESHOLD)
    loose = segment_alarms(shares, loose_runs, 0.05, seed=12)[:, 0].sum()
    assert loose <= stats.binom.ppf(0.999, loose_runs, 0.05)


@pytest.mark.parametrize("shares", DESIGNS, ids=IDS)
def test_a_truly_broken_small_segment_is_still_found(shares):
    # One segment sized so its last (smallest) arm expects 60 units, of which it loses three quarters.
    runs = 200
    found = segment_alarms(shares, runs, DEFAULT_THRESHOLD, seed=13, broken_units=round(60 / shares[-1]))[:, 1]
    assert found.mean() >= 0.95


def test_duplicate_logging_is_not_named_on_heavy_tailed_healthy_logs():
    # Pareto(1.3) records per unit, balanced arms: the cause fires within the threshold plus Monte Carlo
    # error (scipy.stats.binom.ppf); 1,000 logs of 2,000 units here, more in `make bench`.
    runs = 1000
    assert duplicate_cause_fires(runs, 2000, DEFAULT_THRESHOLD, seed=14) <= stats.binom.ppf(0.999, runs,
                                                                                              DEFAULT_THRESHOLD)
