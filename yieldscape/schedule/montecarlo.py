"""Monte Carlo replicates of a schedule under random stand-replacing disturbance."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from yieldscape.policies import Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule.simulate import HarvestRules, simulate


def monte_carlo_table(
    targets: tuple[float, ...],
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules,
    replicates: int,
    seed: int,
) -> pd.DataFrame:
    """Replicates of the schedule's targets under random whole-stand disturbance.

    Each replicate aims at the harvest the expected-value schedule takes in each period;
    P10 / P50 / P90 of harvest and growing stock and the share of replicates that fall short
    of the target are reported per period (``targets``: the harvest the expected-value
    schedule takes). ``rules.disturbance`` is the rate; the draws come from ``seed``.
    """
    rng = np.random.default_rng(seed)
    h, gs = [], []
    plain = replace(rules, snapshots=())
    for _ in range(replicates):  # replicates, each a vectorised horizon
        sim = simulate(arrays, curves, periods, Targets(targets), plain, record=True, rng=rng)
        h.append(sim.harvest_m3)
        gs.append(sim.growing_stock_end_m3)
    h_arr, gs_arr = np.array(h), np.array(gs)
    short = h_arr < np.asarray(targets)[None, :] * (1 - 1e-6)
    q = [10, 50, 90]
    hp, gp = np.percentile(h_arr, q, axis=0), np.percentile(gs_arr, q, axis=0)
    return pd.DataFrame(
        {
            "period": np.arange(1, periods.count + 1),
            "target_m3": targets,
            "p10_m3": hp[0],
            "p50_m3": hp[1],
            "p90_m3": hp[2],
            "shortfall_probability": short.mean(axis=0),
            "growing_stock_p10_m3": gp[0],
            "growing_stock_p50_m3": gp[1],
            "growing_stock_p90_m3": gp[2],
        }
    )
