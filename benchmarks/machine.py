"""Facts about the machine a benchmark ran on, and stamped progress lines."""

from __future__ import annotations

import os
import platform
import sys
import time
from datetime import UTC, datetime
from typing import Any

import emcee
import numpy as np
import scipy

__all__ = ["load", "machine_facts", "say", "since_start"]

_T0 = time.perf_counter()


def since_start() -> float:
    """Seconds since this module was imported (the start of the benchmark run)."""
    return time.perf_counter() - _T0


def say(message: str) -> None:
    """A progress line on stderr, stamped with the seconds since the run began."""
    sys.stderr.write(f"[{since_start():7.1f} s] {message}\n")
    sys.stderr.flush()


def load() -> list[float]:
    """The 1, 5 and 15 minute load averages."""
    return [round(x, 2) for x in os.getloadavg()]


def machine_facts() -> dict[str, Any]:
    """Date, CPUs, versions, BLAS and thread settings of this run."""
    threads = {k: os.environ[k] for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                          "MKL_NUM_THREADS") if k in os.environ}
    try:
        blas = str(np.show_config(mode="dicts")["Build Dependencies"]["blas"]["name"])
    except (KeyError, TypeError, ValueError):
        blas = "unknown"
    usable = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    return {
        "date": datetime.now(UTC).isoformat(timespec="seconds"),
        "cpu_count": os.cpu_count(),
        "cpus_usable": usable,
        "platform": platform.platform(),
        "processor": platform.machine(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "emcee": emcee.__version__,
        "blas": blas,
        "thread_settings": threads,
        "load_average_start": load(),
    }
