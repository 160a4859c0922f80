"""The anytime-valid sequential test of a split, for one design or a ramp (several design versions).

A chi-square test repeated every day crosses any threshold by chance more
often than the threshold says. This test does not. For each design version v
it keeps the Bayes factor of a Dirichlet-multinomial alternative centred on
the version's shares (prior Dirichlet(concentration x s_v)) against the
version's multinomial, over the units first exposed under v (Lindon & Malek,
"Anytime-valid inference for multinomial count data", NeurIPS 2022).

With several versions the evidence is the product of the per-version Bayes
factors. It stays a test martingale: every new unit belongs to one version
and moves only that version's factor, whose expected ratio given the past is
1 under the design, so the product's expected ratio is 1 as well (versions
are fixed by the time of first exposure, before the arm is seen). Ville's
inequality then bounds the chance that it ever exceeds 1/alpha by alpha, so
the running minimum of 1 / product is a p-value valid at every look, daily
looks included. A unit in an arm its version closes has probability 0 under
the design: the p-value is 0 from that day on.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

DEFAULT_CONCENTRATION = 1000.0  # prior share SD about 1.6 points at 50/50: tuned to the small imbalances SRM is about


def sequential_p_values(daily: ArrayLike, shares: ArrayLike, concentration: float = DEFAULT_CONCENTRATION) -> list[float]:
    """Anytime-valid p-values after each day, from the counts of units new that day.

    `daily[day][arm]` with `shares[arm]` for one design, or
    `daily[day][version][arm]` with `shares[version][arm]` for a ramp.
    """
    counts = np.asarray(daily, dtype=float)
    design = np.asarray(shares, dtype=float)
    if counts.size == 0:
        return []
    if design.ndim == 1:
        design, counts = design[None, :], counts[:, None, :]
    if counts.ndim != 3 or counts.shape[1:] != design.shape:
        raise ValueError(f"daily counts of shape {counts.shape[1:]} for shares of shape {design.shape}")
    running = np.cumsum(counts, axis=0)  # day, version, arm
    closed = design == 0
    impossible = (running[:, closed] > 0).any(axis=1) if closed.any() else np.zeros(len(running), dtype=bool)
    alphas = np.where(closed, 1.0, concentration * design)  # closed arms are left out of the sums below
    log_shares = np.log(np.where(closed, 1.0, design))
    opened = np.where(closed, 0.0, running)
    units = opened.sum(axis=2)  # day, version
    log_bf = (special.gammaln(concentration) - special.gammaln(concentration + units)
              + np.where(closed, 0.0, special.gammaln(alphas + opened) - special.gammaln(alphas)
                         - opened * log_shares).sum(axis=2)).sum(axis=1)
    best, out = 1.0, []
    for log_evidence, broken in zip(log_bf.tolist(), np.asarray(impossible).tolist()):
        best = 0.0 if broken else min(best, math.exp(-log_evidence) if log_evidence > -700 else 1.0)
        out.append(best)
    return out
