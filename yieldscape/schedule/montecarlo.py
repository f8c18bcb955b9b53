"""Monte Carlo replicates of a schedule under random stand-replacing disturbance."""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from yieldscape.policies import Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule.simulate import HarvestRules, simulate

if TYPE_CHECKING:
    from yieldscape.parallel import Pool

CHUNKS_PER_SLOT = 4  # tasks per worker thread: a dead worker's share is small, loads even out


def monte_carlo_table(
    targets: tuple[float, ...],
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules,
    replicates: int,
    seed: int,
    pool: Pool | None = None,
) -> pd.DataFrame:
    """Replicates of the schedule's targets under random whole-stand disturbance.

    Each replicate aims at the harvest the expected-value schedule takes in each period;
    P10 / P50 / P90 of harvest and growing stock and the share of replicates that fall short
    of the target are reported per period (``targets``: the harvest the expected-value
    schedule takes). ``rules.disturbance`` is the rate; the draws come from ``seed``: one
    generator, replicate after replicate. With a ``pool`` the replicates run as tasks in
    chunks, each chunk's generator moved on to where its first replicate starts in that one
    sequence (:func:`_replicate_chunk`), so the table is the same.
    """
    # the region's harvest replayed: with management units too (one regional target)
    plain = replace(rules, snapshots=(), units=None)
    inputs = (targets, arrays, curves, periods, plain)
    if pool is None:
        h_arr, gs_arr = _replicates(np.random.default_rng(seed), replicates, *inputs)
    else:
        draws = _draws_per_replicate(arrays, periods, plain)
        n = min(replicates, CHUNKS_PER_SLOT * pool.threads)
        bounds = np.linspace(0, replicates, n + 1).round().astype(int)
        chunks = [
            (seed, int(a), int(b - a), draws) for a, b in zip(bounds[:-1], bounds[1:], strict=True)
        ]
        parts = pool.map(_replicate_chunk, chunks, pool.share(inputs))
        h_arr = np.concatenate([p[0] for p in parts])
        gs_arr = np.concatenate([p[1] for p in parts])
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


def _replicates(
    rng: np.random.Generator,
    count: int,
    targets: tuple[float, ...],
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
    plain: HarvestRules,
) -> tuple[np.ndarray, np.ndarray]:
    """``count`` replicates drawing from ``rng`` in turn: harvest [m3] and ending growing
    stock [m3], replicate x period."""
    h = np.empty((count, periods.count))
    gs = np.empty((count, periods.count))
    for r in range(count):  # replicates, each a vectorised horizon
        sim = simulate(arrays, curves, periods, Targets(targets), plain, record=True, rng=rng)
        h[r], gs[r] = sim.harvest_m3, sim.growing_stock_end_m3
    return h, gs


def _draws_per_replicate(arrays: StandArrays, periods: Periods, rules: HarvestRules) -> int:
    """The 64-bit words one replicate takes from its generator: a recorded horizon runs every
    period and draws one uniform per stand in each with disturbance (``simulate``'s
    ``_disturb``: ``rng.random(n_stands)``, one word per double)."""
    return periods.count * arrays.n if rules.disturbance > 0 else 0


def _generator(seed: int, words: int) -> np.random.Generator:
    """``np.random.default_rng(seed)`` after ``words`` 64-bit draws (PCG64's jump ahead)."""
    return np.random.Generator(np.random.PCG64(seed).advance(words))


def _replicate_chunk(
    seed: int, first: int, count: int, draws: int, inputs: tuple
) -> tuple[np.ndarray, np.ndarray]:
    """Replicates ``first`` .. ``first + count - 1`` of the serial sequence (a task)."""
    rng = _generator(seed, first * draws)
    h, gs = _replicates(rng, count, *inputs)
    if rng.bit_generator.state != _generator(seed, (first + count) * draws).bit_generator.state:
        raise RuntimeError(  # a bug: simulate draws otherwise than _draws_per_replicate says
            f"Monte Carlo replicates {first}..{first + count - 1} took another number of "
            f"random draws than {draws} each; the chunks would not match the serial sequence"
        )
    return h, gs
