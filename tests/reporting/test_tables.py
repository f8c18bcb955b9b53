"""The output tables' building blocks, against independent references."""

import numpy as np
import pandas as pd

from yieldscape.reporting.tables import group_sums, periods_cut


def kahan(values):
    """Kahan's compensated summation, left to right (Kahan 1965, Comm. ACM 8:40), NaN skipped."""
    total = comp = 0.0
    for v in map(float, values):  # Python floats: inf - inf is NaN without a warning
        if v != v:
            continue
        y = v - comp
        t = total + y
        comp = (t - total) - y
        if comp != comp:  # an infinite sum stays infinite
            comp = 0.0
        total = t
    return total


def test_group_sums_are_kahan_sums_in_order():
    # values chosen so that plain left-to-right addition would differ (1e16 + 1 + 1), with
    # NaN skipped and an infinite value kept infinite; the reference is the loop above
    rng = np.random.default_rng(5)
    group = np.sort(rng.integers(0, 300, 2000))
    values = rng.choice([1e16, 1.0, 0.1, -3.3, 1e-9, np.nan], 2000)
    values[7] = np.inf
    other = rng.normal(size=2000)
    ids = np.unique(group, return_inverse=True)[1]
    got = group_sums(ids, [values, other])
    for column, sums in zip((values, other), got, strict=True):
        want = [kahan(column[ids == g]) for g in range(ids.max() + 1)]
        np.testing.assert_array_equal(sums, want)
    plain = np.bincount(ids, np.nan_to_num(values, nan=0.0, posinf=0.0))
    assert not np.array_equal(got[0][np.isfinite(got[0])], plain[np.isfinite(got[0])])
    # and pandas' own group sums on these values
    frame = pd.DataFrame({"g": ids, "v": values, "o": other}).groupby("g").sum()
    np.testing.assert_array_equal(got[0], frame["v"].to_numpy())


def test_periods_cut_counts_distinct_periods_per_stand():
    # a stand cut twice in one period counts once; events in no particular order; stands
    # never cut count 0; the reference is a set of (stand, period) pairs per stand
    stand = np.array([2, 0, 2, 2, 4, 0, 2])
    period = np.array([3, 1, 1, 3, 2, 1, 2])
    got = periods_cut(stand, period, 6, 3)
    pairs = set(zip(stand.tolist(), period.tolist(), strict=True))
    want = [sum(1 for s, _ in pairs if s == i) for i in range(6)]
    assert want == [1, 0, 3, 0, 1, 0]
    np.testing.assert_array_equal(got, want)
