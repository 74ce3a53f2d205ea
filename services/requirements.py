"""What the designer needs the part to do: the targets a check compares the optics and geometry with."""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields, replace

from services.errors import UnusableInput

LOSS_BASES = ("each_frequency", "band_average")

# Field name -> (what a person calls it, unit) for sentences and form labels.
LABELS = {
    "band_ghz": ("band", "GHz"),
    "max_insertion_loss_db": ("insertion loss", "dB"),
    "max_spot_fwhm_ratio": ("spot FWHM at the design focal plane over the diffraction limit", "x"),
    "min_focusing_efficiency": ("focusing efficiency", ""),
    "min_strehl": ("Strehl ratio", ""),
    "focal_length_mm": ("focal length", "mm"),
    "max_thickness_mm": ("thickness along the axis", "mm"),
    "max_diameter_mm": ("diameter", "mm"),
    "f_number_min": ("f-number", ""),
    "f_number_max": ("f-number", ""),
    "min_mode_purity": ("vortex mode purity", ""),
}


@dataclass(frozen=True, slots=True)
class Requirements:
    """The designer's targets for one part; None means not stated.

    band_ghz : (low, high), the frequencies the targets hold over; with no design frequencies given,
    the check evaluates the optics at the band's ends and middle.
    max_insertion_loss_db : over each frequency (``loss_basis`` "each_frequency") or the band's mean.
    max_spot_fwhm_ratio : the spot's FWHM at the design focal plane over the diffraction-limited FWHM.
    focal_length_mm, focal_tolerance_mm : where the wavefront must converge, from the part's far extreme.
    """

    band_ghz: tuple[float, float] | None = None
    max_insertion_loss_db: float | None = None
    loss_basis: str = "each_frequency"
    max_spot_fwhm_ratio: float | None = None
    min_focusing_efficiency: float | None = None
    min_strehl: float | None = None
    focal_length_mm: float | None = None
    focal_tolerance_mm: float | None = None
    max_thickness_mm: float | None = None
    max_diameter_mm: float | None = None
    f_number_min: float | None = None
    f_number_max: float | None = None
    min_mode_purity: float | None = None
    source: str = "designer"

    def __post_init__(self) -> None:
        _check_band(self.band_ghz)
        if self.loss_basis not in LOSS_BASES:
            raise UnusableInput("bad_requirement", f"The insertion-loss basis must be one of {', '.join(LOSS_BASES)}.")
        _check_range("max_insertion_loss_db", self.max_insertion_loss_db, 0, 100, "between 0 and 100 dB")
        _check_range("max_spot_fwhm_ratio", self.max_spot_fwhm_ratio, 0.5, 100,
                     "between 0.5 and 100 (1 is the diffraction limit)")
        for name in ("min_focusing_efficiency", "min_strehl", "min_mode_purity"):
            _check_range(name, getattr(self, name), 0, 1, "a fraction between 0 and 1 (e.g. 0.8, not 80)")
        for name in ("focal_length_mm", "max_thickness_mm", "max_diameter_mm", "f_number_min", "f_number_max"):
            _check_range(name, getattr(self, name), 0, 1e5, "positive")
        _check_focal(self.focal_length_mm, self.focal_tolerance_mm)
        if self.f_number_min is not None and self.f_number_max is not None and self.f_number_min > self.f_number_max:
            raise UnusableInput("bad_requirement", "The smallest f-number must not exceed the largest.")

    @property
    def stated(self) -> bool:
        """Return True when any target is given (a band alone is a frequency choice, not a target)."""
        return any(getattr(self, f.name) is not None for f in fields(self)
                   if f.name not in ("band_ghz", "loss_basis", "source", "focal_tolerance_mm"))

    def to_dict(self) -> dict:
        d = asdict(self)
        d["band_ghz"] = list(self.band_ghz) if self.band_ghz is not None else None
        return d

    @classmethod
    def from_dict(cls, data: dict | None) -> Requirements:
        """Return requirements from JSON (a CLI file, an API body, stored settings); unknown keys are refused."""
        data = dict(data or {})
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise UnusableInput("bad_requirement", f"Unknown requirement {', '.join(map(repr, unknown))}; "
                                                   f"known ones are {', '.join(sorted(known))}.")
        if data.get("band_ghz") is not None:
            band = data["band_ghz"]
            if isinstance(band, (int, float)) or len(band) != 2:
                raise UnusableInput("bad_requirement", "Give the band as two frequencies in GHz, low and high.")
            data["band_ghz"] = (_number("band_ghz", band[0]), _number("band_ghz", band[1]))
        for name in known - {"band_ghz", "loss_basis", "source"}:
            if data.get(name) is not None:
                data[name] = _number(name, data[name])
        return cls(**data)

    def band_freqs_ghz(self) -> tuple[float, ...]:
        """Return the band's low end, middle and high end (one value for a single-frequency band)."""
        if self.band_ghz is None:
            return ()
        lo, hi = self.band_ghz
        return (lo,) if lo == hi else (lo, round((lo + hi) / 2, 6), hi)

    def labelled(self, source: str) -> Requirements:
        """Return the same targets saying where they came from."""
        return replace(self, source=source)


def _number(name: str, value) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        raise UnusableInput("bad_requirement", f"The requirement {name} must be a number, not {value!r}.") from None


def _check_band(band) -> None:
    if band is None:
        return
    lo, hi = band
    if not (0 < lo <= hi <= 10_000):
        raise UnusableInput("bad_requirement", "The band must run from a low to a high frequency between 0 and "
                                               "10,000 GHz, low first.")


def _check_range(name: str, value, lo: float, hi: float, words: str) -> None:
    if value is not None and not (lo < value <= hi if lo == 0 else lo <= value <= hi):
        what, unit = LABELS[name]
        raise UnusableInput("bad_requirement", f"The {what} requirement must be {words}"
                                               f"{f' ({unit})' if unit not in ('', 'x') else ''}, not {value:g}.")


def _check_focal(focal_mm, tolerance_mm) -> None:
    if tolerance_mm is None:
        if focal_mm is not None:
            raise UnusableInput("bad_requirement", "Give the focal length's tolerance in mm with the focal length "
                                                   "(e.g. 72 +- 2 mm).")
        return
    if focal_mm is None:
        raise UnusableInput("bad_requirement", "A focal-length tolerance needs the focal length it applies to.")
    if not (0 < tolerance_mm < focal_mm):
        raise UnusableInput("bad_requirement", "The focal-length tolerance must be positive and smaller than the "
                                               "focal length.")


# Targets the invented demo lab (Tarn Valley Millimetre Lab, see the product brief) holds its parts to.
# Invented for the demo, not from any standard: a lab sets its own.
FOCUSING_KINDS = ("plano-convex", "zoned", "multilevel", "graded-index")
DEMO_LAB = "demo lab defaults (invented for the Tarn Valley demo; set your own)"


def default_requirements(kind: str, params: dict) -> Requirements:
    """Return the demo lab's default targets for a component kind at its parameters' design values."""
    if params.get("freq_min_ghz") and params.get("freq_max_ghz"):
        band = (float(params["freq_min_ghz"]), float(params["freq_max_ghz"]))
    elif params.get("freq_ghz"):
        band = (round(0.95 * float(params["freq_ghz"]), 6), round(1.05 * float(params["freq_ghz"]), 6))
    else:
        band = None
    if kind == "spiral":
        return Requirements(band_ghz=band, max_insertion_loss_db=1.5, min_mode_purity=0.8, source=DEMO_LAB)
    if kind not in FOCUSING_KINDS:
        return Requirements(band_ghz=band, max_insertion_loss_db=0.5, source=DEMO_LAB)
    focal = params.get("focal_length_mm")
    focus = {} if not focal else {"focal_length_mm": float(focal), "focal_tolerance_mm": round(0.05 * float(focal), 4)}
    return Requirements(band_ghz=band, max_insertion_loss_db=1.5, max_spot_fwhm_ratio=1.3,
                        min_focusing_efficiency=0.5, min_strehl=0.8, **focus, source=DEMO_LAB)


def requirements_with_defaults(explicit: dict, *, kind: str | None = None, params: dict | None = None,
                               use_defaults: bool = False, source: str = "designer") -> Requirements | None:
    """Return the stated targets over the demo lab's defaults for the kind (when asked), or None if none.

    ``explicit`` holds only the targets the designer gave; they win over the defaults one by one.
    """
    data = {}
    if use_defaults and kind:
        base = default_requirements(kind, params or {})
        data, source = base.to_dict(), base.source
    data.update(explicit)
    if not any(v is not None for k, v in data.items() if k not in ("source", "loss_basis")):
        return None
    return Requirements.from_dict({**data, "source": data.get("source") or source})
