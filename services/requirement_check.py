"""The ``requirement`` findings: the designer's targets against the part as designed, as printed and at both
ends of the printer's tolerance band, and the ``meets_requirements`` answer they add up to.

Each target ends in one of: met; missed (as designed: the design must change); lost in printing (met as
designed, missed as printed, nominally or at an end of the printer's tolerance band: the printer or material
is the problem); not evaluated (the check could not compute it; counted as not met).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from services.findings import Finding
from services.numbers_text import significant
from services.requirements import LABELS, Requirements

MEETS = ("yes", "no", "not_evaluated", "not_stated")
SEVERITY = {"missed": "blocker", "lost_in_printing": "blocker", "not_evaluated": "caution", "met": "note"}


@dataclass(frozen=True, slots=True)
class Outcome:
    """One target's result; values are the worst over the frequencies in the band."""

    requirement: str
    label: str
    status: str
    unit: str
    low: float | None
    high: float | None
    freq_ghz: float | None = None
    as_designed: float | None = None
    as_printed: float | None = None
    tolerance_worst: float | None = None
    tolerance_variant: str | None = None
    why: str | None = None

    def to_dict(self) -> dict:
        return {**asdict(self), "wanted": wanted_text(self)}


@dataclass(frozen=True, slots=True)
class RequirementCheck:
    """The outcomes, their findings and ``meets``: yes | no | not_evaluated (none missed, some not judged: a
    target that does not apply to the part, or a quantity the check did not compute) | not_stated."""

    meets: str
    outcomes: tuple[Outcome, ...] = ()
    findings: tuple[Finding, ...] = ()
    requirements: Requirements | None = None

    def to_dict(self) -> dict:
        return {"meets": self.meets, "source": self.requirements.source if self.requirements else None,
                "stated": self.requirements.to_dict() if self.requirements else None,
                "outcomes": [o.to_dict() for o in self.outcomes],
                "how": "each target checked as designed, as printed (nominal) and on the print grown, shrunk, "
                       "stretched and squashed by the printer's accuracy; values are the worst over the band's "
                       "evaluated frequencies; the spot is measured at the design focal plane"}


@dataclass(frozen=True, slots=True, eq=False)
class _Series:
    """One quantity per frequency: as designed, as printed, and per tolerance variant."""

    designed: np.ndarray
    printed: np.ndarray
    variants: dict
    freqs_ghz: np.ndarray | None


def check_requirements(requirements: Requirements | None, *, optics: dict | None, bbox_mm: tuple[float, float, float],
                       printed_thickness_mm: float | None = None) -> RequirementCheck:
    """Return every stated target's outcome and finding, and whether the part meets them all."""
    if requirements is None or not requirements.stated:
        return RequirementCheck("not_stated", requirements=requirements)
    outcomes = [*_optics_outcomes(requirements, optics), *_geometry_outcomes(requirements, optics, bbox_mm,
                                                                            printed_thickness_mm)]
    statuses = {o.status for o in outcomes}
    meets = "yes" if statuses <= {"met"} else "not_evaluated" if statuses <= {"met", "not_evaluated"} else "no"
    return RequirementCheck(meets, tuple(outcomes), tuple(_finding(o) for o in outcomes), requirements)


def _optics_outcomes(req: Requirements, optics: dict | None) -> list[Outcome]:
    wanted = [(name, lo, hi) for name, lo, hi in (
        ("max_insertion_loss_db", None, req.max_insertion_loss_db),
        ("max_spot_fwhm_ratio", None, req.max_spot_fwhm_ratio),
        ("min_focusing_efficiency", req.min_focusing_efficiency, None),
        ("min_strehl", req.min_strehl, None),
        ("focal_length_mm", *_focal_range(req)),
        ("min_mode_purity", req.min_mode_purity, None),
    ) if lo is not None or hi is not None]
    out = []
    for name, lo, hi in wanted:
        series, why = _series_for(name, req, optics)
        out.append(_judge(name, series, lo, hi) if series is not None else _not_evaluated(name, lo, hi, why))
    return out


def _focal_range(req: Requirements) -> tuple[float | None, float | None]:
    if req.focal_length_mm is None:
        return None, None
    return req.focal_length_mm - req.focal_tolerance_mm, req.focal_length_mm + req.focal_tolerance_mm


# Requirement -> (where in the optics section, key in the focus section or losses, key in the tolerance variants)
_SOURCES = {
    "max_insertion_loss_db": (None, "transmission_loss_db"),
    "max_spot_fwhm_ratio": ("focus", "design_plane_fwhm_ratio"),
    "min_focusing_efficiency": ("focus", "focusing_efficiency"),
    "min_strehl": ("focus", "strehl"),
    "focal_length_mm": ("focus", "wavefront_focus_mm"),
}


def _series_for(name: str, req: Requirements, optics: dict | None) -> tuple[_Series | None, str | None]:
    """Return the quantity a target is judged on, restricted to the band, or None and why not."""
    if optics is None:
        return None, "the check has no optics section"
    if optics.get("not_computed"):
        return None, f"the optics were not computed ({optics['not_computed'].rstrip('.')})"
    if name == "min_mode_purity":
        return _mode_purity(optics)
    section, key = _SOURCES[name]
    printed = optics.get(section) if section else optics
    designed = (optics.get("as_designed") or {}).get(section) if section else optics.get("as_designed")
    if not printed or not designed or key not in printed:
        return None, "no focal length was given, so the focus was not computed (state one in the optics settings)"
    variants = (optics.get("tolerance") or {}).get("variants") or {}
    series = _Series(np.array(designed[key], float), np.array(printed[key], float),
                     {v: np.array(vals[key], float) for v, vals in variants.items() if key in vals},
                     np.array(optics["frequencies_ghz"], float))
    cut, why = _in_band(series, req, name)
    if name == "min_strehl" and cut is not None:
        read = _strehl_read_nothing(printed, designed, series.freqs_ghz, cut.freqs_ghz)
        if read is not None:
            return None, (f"the Strehl ratio reads {read:.2f}, above 1, with the on-axis peak well short of the "
                          "ideal wave's: it compares two distances and measures nothing to judge against (see the "
                          "focus note)")
    return cut, why


def _strehl_read_nothing(printed: dict, designed: dict, freqs_ghz: np.ndarray, band_ghz: np.ndarray) -> float | None:
    """Return the largest Strehl ratio in the band, as printed or as designed, that measures nothing
    (``checks.strehl_reads_nothing``), else None."""
    from services.optics.checks import strehl_reads_nothing

    in_band = np.isin(freqs_ghz, band_ghz)
    worst = None
    for focus in (printed, designed):
        if "ideal_peak_mm" not in focus:
            continue
        strehl = np.array(focus["strehl"], float)
        hit = strehl_reads_nothing(strehl, focus["best_focus_mm"], focus["ideal_peak_mm"]) & in_band
        if hit.any():
            worst = max(worst or 0.0, float(strehl[hit].max()))
    return worst


def _in_band(series: _Series, req: Requirements, name: str) -> tuple[_Series | None, str | None]:
    freqs = series.freqs_ghz
    keep = np.ones(len(freqs), bool) if req.band_ghz is None else \
        (freqs >= req.band_ghz[0] * (1 - 1e-9)) & (freqs <= req.band_ghz[1] * (1 + 1e-9))
    if not keep.any():
        listed = ", ".join(f"{f:g}" for f in freqs)
        return None, (f"none of the evaluated frequencies ({listed} GHz) lies in the required band "
                      f"{req.band_ghz[0]:g}-{req.band_ghz[1]:g} GHz")
    cut = _Series(series.designed[keep], series.printed[keep], {k: v[keep] for k, v in series.variants.items()},
                  freqs[keep])
    if name == "max_insertion_loss_db" and req.loss_basis == "band_average":
        return _Series(*(_mean_db(x) for x in (cut.designed, cut.printed)),
                       {k: _mean_db(v) for k, v in cut.variants.items()}, None), None
    return cut, None


def _mean_db(loss_db: np.ndarray) -> np.ndarray:
    """Return the loss of the band-averaged transmitted power, in dB."""
    return np.array([-10 * np.log10(np.mean(10 ** (-loss_db / 10)))])


def _mode_purity(optics: dict) -> tuple[_Series | None, str | None]:
    """Return the vortex mode purity when the optics computed one (a ``mode_purity`` list per frequency)."""
    vortex = optics.get("vortex") or {}
    printed = (vortex.get("as_printed") or {}).get("mode_purity", vortex.get("mode_purity", optics.get("mode_purity")))
    designed = (vortex.get("as_designed") or {}).get(
        "mode_purity", vortex.get("as_designed_mode_purity", (optics.get("as_designed") or {}).get("mode_purity")))
    if printed is None or designed is None:
        return None, "the optics section carries no vortex mode purity for this part"
    variants = (optics.get("tolerance") or {}).get("variants") or {}
    return _Series(np.atleast_1d(np.array(designed, float)), np.atleast_1d(np.array(printed, float)),
                   {v: np.array(vals["mode_purity"], float) for v, vals in variants.items() if "mode_purity" in vals},
                   np.array(optics["frequencies_ghz"], float)[:len(np.atleast_1d(printed))]), None


def _geometry_outcomes(req: Requirements, optics: dict | None, bbox_mm, printed_thickness_mm) -> list[Outcome]:
    """Judge thickness, diameter and f-number; the f-number uses the measured wavefront focus."""
    thickness, diameter = float(bbox_mm[2]), float(max(bbox_mm[0], bbox_mm[1]))
    out = []
    if req.max_thickness_mm is not None:
        printed = thickness if printed_thickness_mm is None else printed_thickness_mm
        out.append(_judge("max_thickness_mm", _plain(thickness, printed), None, req.max_thickness_mm))
    if req.max_diameter_mm is not None:
        out.append(_judge("max_diameter_mm", _plain(diameter, diameter), None, req.max_diameter_mm))
    if req.f_number_min is not None or req.f_number_max is not None:
        series, why = _series_for("focal_length_mm", Requirements(band_ghz=req.band_ghz), optics)
        name = "f_number_min" if req.f_number_min is not None else "f_number_max"
        if series is None:
            out.append(_not_evaluated(name, req.f_number_min, req.f_number_max, why))
        else:
            scaled = _Series(series.designed / diameter, series.printed / diameter,
                             {k: v / diameter for k, v in series.variants.items()}, series.freqs_ghz)
            out.append(_judge(name, scaled, req.f_number_min, req.f_number_max))
    return out


def _plain(designed: float, printed: float) -> _Series:
    return _Series(np.array([designed]), np.array([printed]), {}, None)


def _judge(name: str, s: _Series, lo: float | None, hi: float | None) -> Outcome:
    """Return the outcome: the worst frequency of each model decides."""
    def excess(values: np.ndarray) -> np.ndarray:
        # How far outside [lo, hi] each value lies; negative inside (the margin left).
        return np.maximum(lo - values if lo is not None else -np.inf, values - hi if hi is not None else -np.inf)

    d, p = excess(s.designed), excess(s.printed)
    worst_variant, t_value, t_excess = None, None, -np.inf
    for variant, values in s.variants.items():
        e = excess(values)
        if e.max() > t_excess:
            worst_variant, t_excess, t_value = variant, float(e.max()), float(values[int(np.argmax(e))])
    # A part the printer makes anywhere inside its accuracy must still meet the target.
    status = "missed" if d.max() > 0 else "lost_in_printing" if max(p.max(), t_excess) > 0 else "met"
    at = int(np.argmax(d)) if status == "missed" else int(np.argmax(p))
    label, unit = _label(name)
    return Outcome(name, label, status, unit, lo, hi,
                   freq_ghz=None if s.freqs_ghz is None else float(s.freqs_ghz[at]),
                   as_designed=float(s.designed[at]), as_printed=float(s.printed[at]),
                   tolerance_worst=t_value, tolerance_variant=worst_variant)


def _not_evaluated(name: str, lo, hi, why: str) -> Outcome:
    label, unit = _label(name)
    return Outcome(name, label, "not_evaluated", unit, lo, hi, why=why)


def _label(name: str) -> tuple[str, str]:
    return LABELS[name]


def _finding(o: Outcome) -> Finding:
    measured = o.as_designed if o.status == "missed" else o.as_printed
    if o.status == "lost_in_printing" and _miss(o, o.as_printed) == 0:
        measured = o.tolerance_worst
    bound = o.high if o.high is not None and (o.low is None or (measured or 0) > o.high) else o.low
    return Finding(rule="requirement", severity=SEVERITY[o.status], message=_sentence(o), measured=measured,
                   limit=bound, unit=o.unit or None)


def _sentence(o: Outcome) -> str:
    want = wanted_text(o)
    at = f" at {o.freq_ghz:g} GHz" if o.freq_ghz is not None else ""
    if o.status == "not_evaluated":
        return (f"Requirement {o.label} ({want}) could not be checked: {o.why}. Not counted as met: the requirements "
                "read \"not all evaluated\" unless another target is missed.")
    if o.status == "missed":
        return (f"Requirement {o.label} ({want}) is missed as designed: {value_text(o.as_designed, o.unit)}{at}, "
                f"{_by(o, o.as_designed)}. "
                "The design must change; a better printer will not fix it.")
    if o.status == "lost_in_printing":
        return (f"Requirement {o.label} ({want}) is met as designed ({value_text(o.as_designed, o.unit)}) but lost in "
                f"printing: {_lost(o)}{at}. The printer or material, not the design, is the problem.")
    return (f"Requirement {o.label} ({want}) is met: {value_text(o.as_printed, o.unit)}{at} as printed, "
            f"{value_text(o.as_designed, o.unit)} as designed, and across the printer's tolerance band.")


def _lost(o: Outcome) -> str:
    """Return where the print misses: nominally, or at an end of the printer's tolerance band."""
    if _miss(o, o.as_printed) > 0:
        return f"{value_text(o.as_printed, o.unit)} as printed, {_by(o, o.as_printed)}"
    end = o.tolerance_variant.replace("_", " ")
    return (f"{value_text(o.as_printed, o.unit)} as printed nominally, but {value_text(o.tolerance_worst, o.unit)} on the print "
            f"{end} by the printer's accuracy, {_by(o, o.tolerance_worst)}")


def _miss(o: Outcome, value: float) -> float:
    """Return how far a value lies outside the wanted range (0 inside it)."""
    return max(o.low - value if o.low is not None else 0.0, value - o.high if o.high is not None else 0.0, 0.0)


def _by(o: Outcome, value: float) -> str:
    return f"missed by {value_text(_miss(o, value), o.unit)}"


def wanted_text(o: Outcome) -> str:
    """Return the target as words: "at most 1.2x", "28.5 mm to 31.5 mm"."""
    if o.low is not None and o.high is not None:
        return f"{value_text(o.low, o.unit)} to {value_text(o.high, o.unit)}"
    return f"at most {value_text(o.high, o.unit)}" if o.high is not None else f"at least {value_text(o.low, o.unit)}"


def value_text(value: float | None, unit: str) -> str:
    """Return a value with its unit, as the sentences and tables show it."""
    if value is None:
        return "-"
    return f"{significant(value)}x" if unit == "x" else f"{significant(value, 4)} {unit}" if unit else significant(value)
