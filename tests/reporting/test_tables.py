"""The output tables' building blocks, against independent references."""

import numpy as np
import pandas as pd

from yieldscape.reporting.tables import group_sums


def test_group_sums_are_pandas_groupby_sums_to_the_last_bit():
    # the reference: pandas' own groupby().sum() (Kahan-compensated, in row order); values
    # chosen so that plain left-to-right addition would differ (1e16 + 1 + 1), with NaN skipped
    # and an infinite value kept infinite
    rng = np.random.default_rng(5)
    group = np.sort(rng.integers(0, 300, 2000))
    values = rng.choice([1e16, 1.0, 0.1, -3.3, 1e-9, np.nan], 2000)
    values[7] = np.inf
    other = rng.normal(size=2000)
    got = group_sums(np.unique(group, return_inverse=True)[1], [values, other])
    want = pd.DataFrame({"g": group, "v": values, "o": other}).groupby("g").sum()
    np.testing.assert_array_equal(got[0], want["v"].to_numpy())
    np.testing.assert_array_equal(got[1], want["o"].to_numpy())
    assert not np.array_equal(
        got[0], np.bincount(group, np.nan_to_num(values, nan=0.0))[np.unique(group)]
    )
