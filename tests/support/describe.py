"""Failure messages that say what an array held, for ``assert np.all(...), message``.

A bare ``assert np.all(x < limit)`` fails with ``assert False``; these name the entries that
broke the rule and their values, so a failure says what came as well as what was expected.
They only format: the assertion itself stays in the test.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

#: How many failing entries a message lists (the count covers all of them).
SHOWN = 8


def nonfinite(x: ArrayLike) -> str:
    """``"3 of 4800 samples not finite, the first at index 17"`` (or that all were finite)."""
    flat = np.asarray(x).reshape(-1)
    bad = np.flatnonzero(~np.isfinite(flat))
    if bad.size == 0:
        return f"all {flat.size} samples finite"
    return f"{bad.size} of {flat.size} samples not finite, the first at index {int(bad[0])}"


def finite_peak(x: ArrayLike, ceiling: float) -> str:
    """:func:`nonfinite`, then the largest finite magnitude against ``ceiling``."""
    flat = np.asarray(x, dtype=np.float64).reshape(-1)
    magnitude = np.abs(flat[np.isfinite(flat)])
    peak = f"{magnitude.max():.7f}" if magnitude.size else "none"
    over = int(np.count_nonzero(magnitude > ceiling))
    return f"{nonfinite(flat)}; peak {peak}, ceiling {ceiling:.7f}, {over} samples over it"


def failing(ok: ArrayLike, values: ArrayLike, labels: ArrayLike | None = None, what: str = "entries") -> str:
    """Which entries broke the rule: ``"2 of 4 entries fail: [3]=-61.2, [7]=-55"``.

    ``ok`` is the rule's outcome per entry and ``values`` what was checked, of the same shape;
    ``labels`` (1-D, as many as entries) names them instead of their indices, e.g. harmonic numbers.
    """
    ok_arr = np.asarray(ok, dtype=bool)
    vals = np.broadcast_to(np.asarray(values), ok_arr.shape)
    bad = np.argwhere(~ok_arr)
    if bad.size == 0:
        return f"all {ok_arr.size} {what} pass"
    names = np.asarray(labels).reshape(-1) if labels is not None else None
    shown = []
    for index in bad[:SHOWN]:
        where = tuple(int(i) for i in index)
        name = f"{names[np.ravel_multi_index(where, ok_arr.shape)]}" if names is not None else \
            ",".join(map(str, where))
        value = vals[where]
        shown.append(f"[{name}]={value:.6g}" if np.issubdtype(vals.dtype, np.number) else f"[{name}]={value}")
    more = ", ..." if len(bad) > SHOWN else ""
    return f"{len(bad)} of {ok_arr.size} {what} fail: {', '.join(shown)}{more}"
