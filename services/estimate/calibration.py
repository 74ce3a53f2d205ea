"""Calibrate print-time estimates against the lab's logged prints."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from services.errors import UnusableInput


@dataclass(frozen=True, slots=True)
class Calibration:
    """A correction factor for one printer's estimates, fitted from logged prints.

    ``factor`` multiplies the model's time; ``count`` is the number of logs it rests on (0: none);
    ``spread`` is the RMS relative scatter of the logs about the corrected estimate.
    """

    factor: float = 1.0
    count: int = 0
    spread: float | None = None

    def to_dict(self) -> dict:
        return {"factor": round(self.factor, 4), "count": self.count,
                "spread": None if self.spread is None else round(self.spread, 4)}


def fit_calibration(logs: list[tuple[float, float]]) -> Calibration:
    """Return the least-squares factor that maps estimated to actual print times."""
    if not logs:
        return Calibration()
    pairs = np.asarray(logs, dtype=np.float64)
    if pairs.ndim != 2 or pairs.shape[1] != 2 or not np.all(np.isfinite(pairs)) or np.any(pairs <= 0):
        raise UnusableInput("bad_print_log",
                            "Each print log needs a positive estimated "
                            "and a positive actual time in seconds.")
    estimated, actual = pairs[:, 0], pairs[:, 1]
    # Minimising sum (actual - f estimated)^2 over f gives f = sum(e a) / sum(e^2): ordinary least
    # squares through the origin (a time model that is right up to a scale).
    factor = float(estimated @ actual / (estimated @ estimated))
    relative = actual / (factor * estimated) - 1.0
    return Calibration(factor=factor, count=len(pairs), spread=float(math.sqrt(np.mean(relative**2))))
