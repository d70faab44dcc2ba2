"""Shared check of the uncertainty-band tests: does a 1-sigma band cover the truth?"""

import numpy as np


def band_hits(profile, column: str, true_value: float, length_m: float, margin_m: float = 40.0,
              every: int = 25) -> np.ndarray:
    """Booleans |estimate - truth| <= its stated 1-sigma (``<column>`` and the matching
    ``_sd_`` column, e.g. curvature_per_m / curvature_sd_per_m) at the stations more than
    ``margin_m`` from either end, every ``every``-th one (neighbouring stations are correlated)."""
    core = (profile.chainage_m > margin_m) & (profile.chainage_m < length_m - margin_m)
    sel = np.flatnonzero(core)[::every]
    value = getattr(profile, column)[sel]
    sd = getattr(profile, column.replace("_per_m", "_sd_per_m"))[sel]
    return np.abs(value - true_value) <= sd
