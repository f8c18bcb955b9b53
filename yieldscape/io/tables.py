"""Small tables users hand to yieldscape (age/volume points for fitting)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from yieldscape.errors import InputError


def read_points(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Age [years] and volume [m3/ha] points from a CSV with age_years and volume_m3_ha."""
    try:
        frame = pd.read_csv(path)
    except FileNotFoundError:
        raise InputError(f"{path}: points file not found") from None
    except OSError as exc:  # a folder, a file not readable
        raise InputError(f"{path}: cannot read the points file ({exc.strerror})") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: not a readable CSV ({exc})") from None
    for col in ("age_years", "volume_m3_ha"):
        if col not in frame.columns:
            raise InputError(f"{path}: no column {col!r}; found: {', '.join(map(str, frame))}")
    out = []
    for col in ("age_years", "volume_m3_ha"):
        values = pd.to_numeric(frame[col], errors="coerce")
        bad = values.isna() | ~np.isfinite(values)
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(
                f"{path}, line {i + 2}, column {col!r}: {frame[col].iloc[i]!r} is not a number"
            )
        out.append(values.to_numpy(dtype=np.float64))
    if (out[0] <= 0).any():
        raise InputError(f"{path}: ages must be > 0 to fit a curve")
    return out[0], out[1]
