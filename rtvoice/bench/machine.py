"""A description of the machine the figures were measured on."""

from __future__ import annotations

import contextlib
import ctypes
import io
import os
import platform
import sys
import warnings

import numpy as np
import scipy

#: The engine process runs BLAS single-threaded (an audio callback must not wait for workers).
BLAS_THREADS_ENV = "OPENBLAS_NUM_THREADS"


def _cpuinfo() -> dict[str, str]:
    fields: dict[str, str] = {}
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if ":" in line:
                    key, value = (s.strip() for s in line.split(":", 1))
                    fields.setdefault(key, value)
    except OSError:
        pass
    return fields


def _mem_total_gib() -> float | None:
    try:
        with open("/proc/meminfo", encoding="utf-8") as fh:
            for line in fh:
                if line.startswith("MemTotal:"):
                    return round(int(line.split()[1]) / 2**20, 1)
    except (OSError, ValueError):
        pass
    return None


def _openblas_runtime() -> dict[str, object]:
    """Core type and thread count that the loaded OpenBLAS reports, when it can be asked."""
    try:
        from threadpoolctl import threadpool_info  # optional

        return {"threadpoolctl": [
            {k: v for k, v in info.items() if k in ("internal_api", "version", "num_threads", "architecture")}
            for info in threadpool_info()
        ]}
    except ImportError:
        pass
    libs = set()
    with contextlib.suppress(OSError), open("/proc/self/maps", encoding="utf-8") as fh:
        libs = {line.split()[-1] for line in fh if "openblas" in line.lower() and line.strip().endswith(".so")}
    out: dict[str, object] = {}
    for path in sorted(libs):
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for prefix, suffix in (("scipy_openblas_", "64_"), ("openblas_", "64_"), ("openblas_", "")):
            try:
                corename = getattr(lib, f"{prefix}get_corename{suffix}")
                threads = getattr(lib, f"{prefix}get_num_threads{suffix}")
            except AttributeError:
                continue
            corename.restype = ctypes.c_char_p
            threads.restype = ctypes.c_int
            out = {"library": os.path.basename(path), "core": corename().decode(), "threads": threads()}
            break
    return out


def _numpy_blas() -> dict[str, object]:
    try:
        with warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()):
            warnings.simplefilter("ignore")
            config = np.show_config(mode="dicts")
        blas = config["Build Dependencies"]["blas"]
        return {k: blas.get(k) for k in ("name", "version", "openblas configuration") if k in blas}
    except (TypeError, KeyError, AttributeError):
        return {}


def load_average() -> list[float] | None:
    """1, 5 and 15 minute load averages: how busy the machine was around the run."""
    try:
        return [round(x, 2) for x in os.getloadavg()]
    except OSError:
        return None


def describe() -> dict[str, object]:
    """CPU, memory, Python, numpy, scipy and BLAS facts, as a flat-ish dict for the report."""
    cpu = _cpuinfo()
    try:
        affinity = sorted(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        affinity = []
    return {
        "cpu_model": cpu.get("model name", platform.processor() or "unknown"),
        "cpu_mhz": cpu.get("cpu MHz"),
        "cpu_cache": cpu.get("cache size"),
        "cpus": os.cpu_count(),
        "pinned_cpus": affinity,
        "memory_gib": _mem_total_gib(),
        "load_average_at_start": load_average(),
        "os": f"{platform.system()} {platform.release()}",
        "python": sys.version.split()[0],
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "blas_build": _numpy_blas(),
        "blas_runtime": _openblas_runtime(),
        BLAS_THREADS_ENV: os.environ.get(BLAS_THREADS_ENV),
    }


#: Scheduling priority while measuring: ahead of ordinary processes on a shared machine, still
#: under the kernel's time sharing (an ordinary nice level, not a real-time class).
MEASURE_NICE = -10


def pin_to_one_cpu() -> tuple[int | None, set[int], int | None]:
    """Run the measuring process on one CPU (the last allowed one), at :data:`MEASURE_NICE`.

    Returns (that CPU or None, the CPUs allowed before, the nice level before) for :func:`unpin`.
    """
    cpu, before, nice = None, set(), None
    try:
        before = set(os.sched_getaffinity(0))
        cpu = max(before)
        os.sched_setaffinity(0, {cpu})
    except (AttributeError, OSError, ValueError):
        cpu = None
    try:
        nice = os.getpriority(os.PRIO_PROCESS, 0)
        os.setpriority(os.PRIO_PROCESS, 0, MEASURE_NICE)  # needs root; otherwise measured at the usual level
    except (AttributeError, OSError):
        pass
    return cpu, before, nice


def current_nice() -> int | None:
    try:
        return os.getpriority(os.PRIO_PROCESS, 0)
    except (AttributeError, OSError):
        return None


def unpin(cpus: set[int], nice: int | None) -> None:
    """Undo :func:`pin_to_one_cpu` (processes started later inherit affinity and priority)."""
    if cpus:
        with contextlib.suppress(AttributeError, OSError):
            os.sched_setaffinity(0, cpus)
    if nice is not None:
        with contextlib.suppress(AttributeError, OSError):
            os.setpriority(os.PRIO_PROCESS, 0, nice)
