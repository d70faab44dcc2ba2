"""Min/max pyramids: the envelope of a per-station value over any run of stations, cheaply.

A chart column usually covers many stations. Drawing the mean (or every k-th station) of each
column hides spikes, so each column shows the *envelope*: the smallest and largest value of the
stations it covers. To make that cost independent of the track length, a ``Pyramid`` stores the
minimum (or maximum) of aligned blocks of 2, 4, 8, ... stations, built once with numpy
reshape/reduce. Any run of stations ``[a, b)`` is the union of at most two blocks per level
(the bottom-up segment-tree walk), so the envelope of ``C`` columns costs ``O(C log n)``
numpy-vectorised work with ``log2 n`` about 20 even for a million stations.

NaN means "no value" (e.g. undefined torsion): blocks ignore NaN (``fmin``/``fmax``), and a
column whose stations are all NaN gets NaN, which the chart draws as a gap, never as a value.

Level arrays are float32: enough for drawing (7 significant digits); readouts use the float64
profile arrays directly.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

#: Level-0 accessor: station indices -> values (lets derived quantities such as value + sd be
#: enveloped without storing a derived array of every station).
BaseFn = Callable[[np.ndarray], np.ndarray]


class Pyramid:
    """One-sided (min or max) block pyramid over a per-station array.

    Parameters
    ----------
    base
        Station values (any float array, not copied) or a function ``idx -> values`` giving the
        level-0 values of the requested stations.
    n
        Number of stations (needed when ``base`` is a function).
    kind
        ``"min"`` or ``"max"``.
    full
        The whole level-0 array, needed once to build level 1 (defaults to ``base`` when it is
        an array). It is not kept.
    """

    def __init__(self, base, kind: str, n: int | None = None, full: np.ndarray | None = None):
        if kind not in ("min", "max"):
            raise ValueError("kind must be 'min' or 'max'")
        self.kind = kind
        self._ufunc = np.fmin if kind == "min" else np.fmax
        if callable(base):
            if n is None or full is None:
                raise ValueError("a function base needs n and full")
            self._base: BaseFn = base
        else:
            arr = np.asarray(base)
            self._base = arr.__getitem__
            full = arr if full is None else full
            n = len(arr)
        self.n = int(n)
        self.levels: list[np.ndarray] = []  # levels[0] is blocks of 2 stations
        cur = np.asarray(full, dtype=np.float32)
        while len(cur) > 1:
            if len(cur) % 2:
                cur = np.concatenate((cur, np.array([np.nan], np.float32)))
            pairs = cur.reshape(-1, 2)
            cur = self._ufunc(pairs[:, 0], pairs[:, 1])
            self.levels.append(cur)

    @property
    def nbytes(self) -> int:
        """Memory held by the block levels, bytes (level 0 belongs to the caller)."""
        return int(sum(level.nbytes for level in self.levels))

    def query(self, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """Min (or max) of stations ``[a[c], b[c])`` for every column ``c``; NaN where empty.

        ``a`` and ``b`` are integer arrays with ``0 <= a <= b <= n``.
        """
        a = np.asarray(a, dtype=np.int64)
        b = np.asarray(b, dtype=np.int64)
        fill = np.inf if self.kind == "min" else -np.inf
        out = np.full(a.shape, fill, dtype=np.float64)
        ufunc = self._ufunc
        lo, hi = a.copy(), b.copy()
        level = -1
        while True:
            live = lo < hi
            if not live.any():
                break
            take = live & (lo & 1).astype(bool)
            if take.any():
                out[take] = ufunc(out[take], self._get(level, lo[take]))
                lo = lo + take
            take = (lo < hi) & (hi & 1).astype(bool)
            if take.any():
                hi = hi - take
                out[take] = ufunc(out[take], self._get(level, hi[take]))
            lo >>= 1
            hi >>= 1
            level += 1
        out[np.isinf(out) & (out == fill)] = np.nan
        return out

    def _get(self, level: int, idx: np.ndarray) -> np.ndarray:
        if level < 0:
            return np.asarray(self._base(idx), dtype=np.float64)
        return self.levels[level][idx].astype(np.float64)


def column_bounds(i0: int, span: int, columns: int) -> tuple[np.ndarray, np.ndarray]:
    """Station ranges ``[a, b)`` covered by each of ``columns`` chart columns.

    The window holds stations ``i0 .. i0 + span - 1``. With more stations than columns each
    column takes a contiguous share (sizes differ by at most one); with fewer, neighbouring
    columns repeat the same station, so every column always covers at least one station.
    """
    c = np.arange(columns + 1, dtype=np.int64)
    edges = i0 + (c * span) // max(columns, 1)
    a, b = edges[:-1], edges[1:]
    b = np.maximum(b, a + 1)
    return a, b


def column_of(index: int, i0: int, span: int, columns: int) -> int:
    """The chart column that shows station ``index`` (the first one when several columns repeat
    it), or -1 when the station is outside the window. Inverse of :func:`column_bounds`."""
    if not (i0 <= index < i0 + span) or columns <= 0:
        return -1
    a, _ = column_bounds(i0, span, columns)
    c = int(np.searchsorted(a, index, side="right")) - 1
    return int(np.searchsorted(a, a[c], side="left"))


class PrefixCount:
    """Count of True values over any run of stations in O(1): ``count(a, b)`` for arrays."""

    def __init__(self, mask: np.ndarray):
        m = np.asarray(mask, dtype=bool)
        dtype = np.int32 if len(m) < 2**31 - 1 else np.int64
        self.cum = np.zeros(len(m) + 1, dtype=dtype)
        np.cumsum(m, out=self.cum[1:])

    @property
    def nbytes(self) -> int:
        return int(self.cum.nbytes)

    def count(self, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        return self.cum[np.asarray(b)] - self.cum[np.asarray(a)]
