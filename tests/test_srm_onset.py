"""The onset of a break: planted breaks are found on their day, for an experiment, a segment and a ramp."""

import numpy as np
import pytest
from scipy import optimize, special

from audit.srm import onset


def planted(seed: int, units_per_day: float, days: int = 28) -> tuple[np.ndarray, int]:
    """Daily new units of a 50/50 split whose second arm loses 20-40 % of its units from a random day."""
    rng = np.random.default_rng(seed)
    truth = int(rng.integers(4, days - 4))
    drop = rng.uniform(0.2, 0.4)
    daily = []
    for day in range(days):
        shares = np.array([0.5, 0.5 * (1 - drop if day >= truth else 1.0)])
        daily.append(rng.multinomial(rng.poisson(units_per_day), shares / shares.sum()))
    return np.array(daily), truth


@pytest.mark.parametrize("units_per_day", [2000, 400], ids=["experiment", "segment"])
def test_planted_breaks_are_dated_within_a_day_in_nine_of_ten_runs(units_per_day):
    # The acceptance: 10 seeds, a drop of 20-40 % in one arm, the onset within one day of the truth.
    close = 0
    for seed in range(10):
        daily, truth = planted(seed, units_per_day)
        found = onset(daily, [0.5, 0.5])
        close += abs(found.day - truth) <= 1
        assert found.low <= found.day <= found.high
    assert close >= 9


def test_interval_holds_the_true_day_in_most_runs():
    covered = 0
    for seed in range(20):
        daily, truth = planted(100 + seed, 400)
        found = onset(daily, [0.5, 0.5])
        covered += found.low - 1 <= truth <= found.high + 1
    assert covered >= 18


def test_a_ramp_is_not_a_break_but_a_drop_after_it_is():
    # 90/10 for ten days, then 75/25 (a healthy ramp, per version), then the small arm loses 30 % on day 20.
    rng = np.random.default_rng(3)
    shares = np.array([[0.9, 0.1], [0.75, 0.25]])
    daily = []
    for day in range(30):
        version = 0 if day < 10 else 1
        split = shares[version] * ([1.0, 0.7] if day >= 20 else [1.0, 1.0])
        cell = np.zeros((2, 2), dtype=np.int64)
        cell[version] = rng.multinomial(2000, split / split.sum())
        daily.append(cell)
    found = onset(daily, shares)
    assert abs(found.day - 20) <= 1 and found.method == "change-point"


def test_likelihood_ratio_matches_a_general_optimiser():
    # Reference: scipy.optimize.minimize over the arm factors (softmax-parametrised) for the onset day found,
    # against the closed-form/MM fit, on a ramp where the versions' shares differ.
    rng = np.random.default_rng(8)
    shares = np.array([[0.6, 0.3, 0.1], [0.4, 0.4, 0.2]])
    daily = []
    for day in range(12):
        cell = np.zeros((2, 3), dtype=np.int64)
        for version in (0, 1):
            split = shares[version] * ([1.0, 0.75, 1.0] if day >= 7 else 1.0)
            cell[version] = rng.multinomial(300 + 100 * version, split / split.sum())
        daily.append(cell)
    daily = np.array(daily)
    found = onset(daily, shares)
    broken = daily[found.day:]

    def negative_log_likelihood(free):
        factors = np.exp(np.append(free, 0.0))
        mixed = shares * factors
        mixed /= mixed.sum(axis=1, keepdims=True)
        return -special.xlogy(broken, mixed[None]).sum()

    best = optimize.minimize(negative_log_likelihood, np.zeros(2), method="Nelder-Mead",
                             options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 5000})
    healthy = special.xlogy(broken, shares[None]).sum()
    assert found.log_likelihood_ratio == pytest.approx(-best.fun - healthy, rel=1e-6)


def test_a_break_from_the_first_day_is_dated_on_the_first_day():
    rng = np.random.default_rng(1)
    daily = rng.multinomial(1000, [0.6, 0.4], size=15)
    assert onset(daily, [0.5, 0.5]).day == 0


def test_units_in_a_closed_arm_date_the_break_on_their_first_day():
    daily = [[100, 100, 0], [98, 99, 0], [90, 95, 12], [91, 97, 8]]
    found = onset(daily, [0.5, 0.5, 0.0])
    assert (found.day, found.low, found.high, found.method) == (2, 2, 2, "first-closed-arm-unit")


def test_no_units_no_onset():
    assert onset([], [0.5, 0.5]) is None
    assert onset([[0, 0], [0, 0]], [0.5, 0.5]) is None
    with pytest.raises(ValueError, match="shape"):
        onset([[1, 2, 3]], [0.5, 0.5])
