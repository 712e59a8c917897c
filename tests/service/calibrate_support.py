"""A stand-in injection for the calibration journal tests (importable by spawned processes).

It draws credible levels uniformly from ``(seed, index)``, leaves a mark per call in
the folder named by ``CHIRPCAST_TEST_MARKS`` and raises at the index named by
``CHIRPCAST_TEST_STOP_AT``: a run stopped part-way, without minutes of real analyses.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np

from service.calibrate import TESTED, CalibrationSetup

__all__ = ["fake_injection"]


def fake_injection(setup: CalibrationSetup, index: int) -> dict[str, Any]:
    """One row shaped like ``run_injection``'s, with uniform credible levels."""
    if index == int(os.environ.get("CHIRPCAST_TEST_STOP_AT", "-1")):
        raise RuntimeError(f"stopped at injection {index}")
    Path(os.environ["CHIRPCAST_TEST_MARKS"], f"{setup.seed}-{index}").touch()
    rng = np.random.default_rng([setup.seed, index])
    row: dict[str, Any] = {"index": index, "attempts": 1, "observed_snr": 8.0 + rng.random(),
                           "seed": index, "mass_ratio_truth": float(rng.random())}
    row |= {f"{k}_level": float(rng.random()) for k in TESTED[:4]}
    row |= {"converged": np.bool_(True), "effective_samples": 2000.0,
            "likelihood_check_passed": True, "wall_s": 0.01}
    return row
