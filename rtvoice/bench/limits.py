"""The machine's limit: bare single-precision complex products of the engine's shapes.

The engine sums M modes over a block of N = N1 * N2 samples as one product
Y = C^T A with C of shape (M, N2) and A of shape (M, N1) (see
:mod:`rtvoice.engine.renderer`). Timed here with nothing around it, that product
is the fastest the engine's formulation can go on this machine; the engine's
efficiency is its throughput divided by this one's.

The direct formulation, an (N x M) table of phasor powers times the vector of M
mode amplitudes (a matrix-vector product), streams the whole table each block:
its time gives the memory bandwidth the machine sustains.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from rtvoice.bench.timing import Timing, time_calls
from rtvoice.engine import block_split

COMPLEX64_BYTES = 8


@dataclass(frozen=True)
class BareProduct:
    modes: int
    block: int
    timing: Timing
    bytes_per_call: int

    @property
    def mode_samples_per_s(self) -> float:
        return self.modes * self.block / (self.timing.median_us * 1e-6)

    @property
    def bandwidth_gb_s(self) -> float:
        return self.bytes_per_call / (self.timing.median_us * 1e-6) / 1e9


def _unit_phasors(rng: np.random.Generator, shape: tuple[int, ...]) -> np.ndarray:
    """Complex64 values of modulus below 1, like decaying phasor powers (no overflow, no denormals)."""
    phase = rng.uniform(0, 2 * np.pi, shape)
    return (0.99 * np.exp(1j * phase)).astype(np.complex64)


def factored_operands(modes: int, block: int, seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """(C^T, A) of :func:`factored_product`: (N2 x modes) and (modes x N1) complex64."""
    n1, n2 = block_split(block)
    rng = np.random.default_rng(seed)
    a = _unit_phasors(rng, (modes, n1))
    c_t = _unit_phasors(rng, (n2, modes))  # row-major C^T: the layout BLAS reads fastest
    return c_t, a


def factored_product(modes: int, block: int, seed: int = 1,
                     columns: Callable[[], int] | None = None) -> tuple[Callable[[], object], int]:
    """(a call computing Y = C^T A, the bytes it reads): C (modes x N2), A (modes x N1) complex64, Y preallocated.

    With ``columns``, each call multiplies only the first ``columns()`` modes (at most
    ``modes``): the bare product of the size the engine's last block had, read as it goes;
    the bytes returned are then those of all ``modes``.
    """
    c_t, a = factored_operands(modes, block, seed)
    n1, n2 = a.shape[1], c_t.shape[0]
    y = np.empty((n2, n1), np.complex64)
    if columns is None:
        return (lambda: np.matmul(c_t, a, out=y)), COMPLEX64_BYTES * modes * (n1 + n2)

    def part() -> np.ndarray:
        m = min(columns(), modes)
        return np.matmul(c_t[:, :m], a[:m], out=y)

    return part, COMPLEX64_BYTES * modes * (n1 + n2)


def bare_table_product(modes: int, block: int, repeats: int, warmup: int = 5, seed: int = 2) -> BareProduct:
    """Time y = T x, T the (block x modes) complex64 table of powers, x the mode amplitudes."""
    rng = np.random.default_rng(seed)
    table = _unit_phasors(rng, (block, modes))
    x = _unit_phasors(rng, (modes,))
    y = np.empty(block, np.complex64)
    timing = time_calls(lambda: np.matmul(table, x, out=y), repeats, warmup)
    return BareProduct(modes, block, timing, COMPLEX64_BYTES * modes * (block + 1))
