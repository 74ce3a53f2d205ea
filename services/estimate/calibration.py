"""Calibrate print-time estimates against the lab's logged prints, so that one bad log cannot skew them.

The fit works on the logarithm of actual over estimated time (a time model that is right up to a
scale makes every log the same number, and a log twice too long weighs as much as one half too
short). Logs far from the rest by the modified z-score are left out with the reason; the others
give a Huber M-estimate of the location, whose pull from any one log is bounded.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# Fewer logs than this give a factor shown to the lab manager but not applied to estimates
# (three is the least from which a median and a spread mean anything; common practice).
MIN_LOGS = 3
# Modified z-score above which a log is an outlier: Iglewicz & Hoaglin 1993, "How to Detect and
# Handle Outliers", ASQC, sec. 3.2 (z_i = 0.6745 (x_i - median) / MAD, outlier when |z_i| > 3.5).
OUTLIER_Z = 3.5
MAD_TO_Z = 0.6745
# Huber's tuning constant, 95 % efficiency at the normal distribution: Huber 1964, "Robust
# estimation of a location parameter", Ann. Math. Statist. 35; the value 1.345 as in Huber &
# Ronchetti 2009 (from memory).
HUBER_K = 1.345
# MAD of a normal sample is 0.6745 sigma, so sigma ~ 1.4826 MAD (the same constant as above).
MAD_TO_SIGMA = 1.0 / MAD_TO_Z
# Printers report minutes and runs of one part differ by a few per cent; a scatter below 2 % is
# not trusted as a scale, or an ordinary print would read as an outlier (engineering judgement [R]).
MIN_SCALE_LOG = 0.02
# One new log may move the correction by at most 10 % (engineering judgement [R]).
MAX_STEP_PER_LOG = 0.10


@dataclass(frozen=True, slots=True)
class Outlier:
    """A log the fit leaves out: its position in the logs given, its ratio, its score and why."""

    index: int
    ratio: float
    z_score: float
    reason: str

    def to_dict(self) -> dict:
        return {"index": self.index, "ratio": round(self.ratio, 4), "z_score": round(self.z_score, 2),
                "reason": self.reason}


@dataclass(frozen=True, slots=True)
class Calibration:
    """A correction factor for one printer's estimates, fitted from logged prints.

    ``factor`` multiplies the model's time once ``applies`` (at least MIN_LOGS logs counted);
    ``count`` is the number of logs it rests on, outliers and unusable rows left out; ``spread``
    is the RMS relative scatter of those logs about the corrected estimate.
    """

    factor: float = 1.0
    count: int = 0
    spread: float | None = None
    outliers: tuple[Outlier, ...] = ()
    ignored: int = 0
    notes: tuple[str, ...] = ()

    @property
    def applies(self) -> bool:
        return self.count >= MIN_LOGS

    def to_dict(self) -> dict:
        return {"factor": round(self.factor, 4), "count": self.count, "applies": self.applies,
                "spread": None if self.spread is None else round(self.spread, 4),
                "outliers": [o.to_dict() for o in self.outliers], "ignored": self.ignored,
                "notes": list(self.notes)}


def fit_calibration(logs: list[tuple[float, float]]) -> Calibration:
    """Return the robust factor that maps estimated to actual print times, and the logs it leaves out.

    ``logs`` are (estimated_s, actual_s) pairs, oldest first (the order matters for the cap).
    """
    pairs = np.asarray(logs, dtype=np.float64).reshape(-1, 2)
    usable = np.all(np.isfinite(pairs), axis=1) & np.all(pairs > 0, axis=1)
    ignored = int(np.count_nonzero(~usable))
    notes = ((f"{ignored} logged print{'s' if ignored > 1 else ''} without two positive, finite times "
              f"{'are' if ignored > 1 else 'is'} ignored; delete and log {'them' if ignored > 1 else 'it'} again.",)
             if ignored else ())
    index = np.flatnonzero(usable)
    if index.size == 0:
        return Calibration(ignored=ignored, notes=notes)
    log_ratio = np.log(pairs[index, 1] / pairs[index, 0])
    outliers = _outliers(log_ratio, index)
    keep = np.ones(index.size, bool)
    keep[[int(np.searchsorted(index, o.index)) for o in outliers]] = False
    kept = log_ratio[keep]
    location = _capped_location(kept)
    relative = np.exp(kept - location) - 1.0
    if kept.size < MIN_LOGS:
        notes += (f"Rests on {kept.size} print{'s' if kept.size != 1 else ''}; the correction applies "
                  f"from {MIN_LOGS}.",)
    return Calibration(factor=float(math.exp(location)), count=int(kept.size),
                       spread=float(math.sqrt(np.mean(relative**2))), outliers=outliers, ignored=ignored, notes=notes)


def modified_z_scores(log_ratio: np.ndarray) -> np.ndarray:
    """Return Iglewicz & Hoaglin's modified z-score of each value (MAD floored at MIN_SCALE_LOG)."""
    median = np.median(log_ratio)
    mad = max(float(np.median(np.abs(log_ratio - median))), MIN_SCALE_LOG * MAD_TO_Z)
    return MAD_TO_Z * (log_ratio - median) / mad


def _outliers(log_ratio: np.ndarray, index: np.ndarray) -> tuple[Outlier, ...]:
    # Below MIN_LOGS a median cannot tell the odd one out, so nothing is called an outlier.
    if log_ratio.size < MIN_LOGS:
        return ()
    z = modified_z_scores(log_ratio)
    typical = math.exp(float(np.median(log_ratio)))
    return tuple(Outlier(index=int(index[i]), ratio=math.exp(float(log_ratio[i])), z_score=float(z[i]),
                         reason=(f"took {math.exp(float(log_ratio[i])):.2f} × its estimate while the logs sit near "
                                 f"× {typical:.2f} (modified z-score {abs(z[i]):.1f}, above {OUTLIER_Z:g}): left out; "
                                 "check the time entered, or whether the print was paused or restarted."))
                 for i in np.flatnonzero(np.abs(z) > OUTLIER_Z))


def _capped_location(values: np.ndarray) -> float:
    """Return the Huber location, replayed log by log in the order given, each log moving it at most the cap.

    The cap starts once MIN_LOGS logs are in (before that nothing applies); a printer whose speed
    really changed is followed in steps of MAX_STEP_PER_LOG per log.
    """
    cap = math.log1p(MAX_STEP_PER_LOG)
    location = _huber_location(values[:MIN_LOGS])
    for n in range(MIN_LOGS + 1, values.size + 1):
        location = min(max(_huber_location(values[:n], start=location), location - cap), location + cap)
    return location


def _huber_location(values: np.ndarray, start: float | None = None) -> float:
    """Return the Huber M-estimate of location with the scale fixed at the normalised MAD.

    ``start`` only speeds the iteration up (the previous fit, when replaying); the estimate is the same.
    """
    median = float(np.median(values))
    clip = HUBER_K * max(MAD_TO_SIGMA * float(np.median(np.abs(values - median))), MIN_SCALE_LOG)
    location = median if start is None else start
    for _ in range(200):
        # Iteratively reweighted mean (Huber 1964): the fixed point solves sum psi(x_i - mu) = 0.
        step = float(np.mean(np.clip(values - location, -clip, clip)))
        location += step
        if abs(step) < 1e-13:
            break
    return location
