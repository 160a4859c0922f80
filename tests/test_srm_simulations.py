"""Error rates of the SRM statistics on simulated clean and broken logs (fixed seeds; long runs in `make bench`)."""

import pytest
from scipy import stats

from audit.srm import DEFAULT_THRESHOLD
from tests.srm_simulations import duplicate_cause_fires, segment_alarms

DESIGNS = [(0.5, 0.5), (0.9, 0.1), (0.99, 0.01)]


@pytest.mark.parametrize("shares", DESIGNS, ids=["50/50", "90/10", "99/1"])
def test_clean_logs_with_200_segments_keep_the_family_wise_rate(shares):
    # 2,000 clean logs per design, 200 segments each, Holm across them: the share of logs with any segment
    # alarm stays within the threshold plus Monte Carlo error (binomial 99.9 % quantile, scipy.stats.binom.ppf);
    # the same at a family level of 5 %, where the bound has power to catch an anti-conservative test.
    runs = 2000
    alarms = segment_alarms(shares, runs, DEFAULT_THRESHOLD, seed=11)[:, 0].sum()
    assert alarms <= stats.binom.ppf(0.999, runs, DEFAULT_THRESHOLD)
    loose = segment_alarms(shares, 500, 0.05, seed=12)[:, 0].sum()
    assert loose <= stats.binom.ppf(0.999, 500, 0.05)


@pytest.mark.parametrize("shares", DESIGNS, ids=["50/50", "90/10", "99/1"])
def test_a_truly_broken_small_segment_is_still_found(shares):
    # One segment sized so its small arm expects 60 units, of which it loses three quarters.
    runs = 200
    found = segment_alarms(shares, runs, DEFAULT_THRESHOLD, seed=13, broken_units=round(60 / shares[1]))[:, 1]
    assert found.mean() >= 0.95


def test_duplicate_logging_is_not_named_on_heavy_tailed_healthy_logs():
    # Pareto(1.3) records per unit, balanced arms: the cause fires within the threshold plus Monte Carlo
    # error (scipy.stats.binom.ppf); 1,000 logs of 2,000 units here, more in `make bench`.
    runs = 1000
    assert duplicate_cause_fires(runs, 2000, DEFAULT_THRESHOLD, seed=14) <= stats.binom.ppf(0.999, runs,
                                                                                              DEFAULT_THRESHOLD)
