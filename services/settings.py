"""What a user chooses for one check besides the part, printer and material."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace

from services.errors import UnusableInput
from services.requirements import Requirements

ORIENTATIONS = ("+z", "-z", "+x", "-x", "+y", "-y")


@dataclass(frozen=True, slots=True)
class OpticsSettings:
    """Design frequencies, illumination and intent for the optics section.

    Exactly one of ``edge_taper_db`` and ``beam_waist_mm`` sets the Gaussian illumination;
    with neither, a 10 dB edge taper at the part's rim is used (common practice).
    ``focal_length_mm`` is measured from the part's far extreme along the optical axis.
    ``clear_aperture_mm`` is the optical zone's diameter about the axis (else the generator's or detected).
    """

    freqs_ghz: tuple[float, ...] = ()
    focal_length_mm: float | None = None
    edge_taper_db: float | None = None
    beam_waist_mm: float | None = None
    phase_error_blocker_strehl: float = 0.5
    clear_aperture_mm: float | None = None

    def __post_init__(self) -> None:
        if any(f <= 0 or f > 10_000 for f in self.freqs_ghz):
            raise UnusableInput("bad_frequency", "Design frequencies must lie between 0 and 10,000 GHz.")
        if self.focal_length_mm is not None and self.focal_length_mm <= 0:
            raise UnusableInput("bad_focal_length", "The focal length must be positive.")
        if self.edge_taper_db is not None and self.beam_waist_mm is not None:
            raise UnusableInput("bad_illumination", "Give either an edge taper or a beam waist, not both.")
        if self.edge_taper_db is not None and not (0 < self.edge_taper_db <= 60):
            raise UnusableInput("bad_illumination", "The edge taper must lie between 0 and 60 dB.")
        if self.beam_waist_mm is not None and self.beam_waist_mm <= 0:
            raise UnusableInput("bad_illumination", "The beam waist must be positive.")
        if self.clear_aperture_mm is not None and self.clear_aperture_mm <= 0:
            raise UnusableInput("bad_clear_aperture", "The clear aperture diameter must be positive.")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["freqs_ghz"] = list(self.freqs_ghz)
        return d


@dataclass(frozen=True, slots=True)
class CheckSettings:
    """Build orientation, quantities to quote, optics settings and the designer's requirements for one check."""

    orientation: str = "+z"
    quantities: tuple[int, ...] = (1, 5, 10, 25)
    optics: OpticsSettings = field(default_factory=OpticsSettings)
    requirements: Requirements | None = None

    def __post_init__(self) -> None:
        if self.orientation not in ORIENTATIONS:
            raise UnusableInput("bad_orientation", f"The build axis must be one of {', '.join(ORIENTATIONS)}.")
        if not self.quantities or any(q < 1 or q > 100_000 for q in self.quantities):
            raise UnusableInput("bad_quantity", "Quantities must be whole numbers from 1 to 100,000.")

    def to_dict(self) -> dict:
        d = {"orientation": self.orientation, "quantities": list(self.quantities), "optics": self.optics.to_dict()}
        if self.requirements is not None:  # absent, not null: settings stored before requirements compare equal
            d["requirements"] = self.requirements.to_dict()
        return d

    def effective_optics(self, parameters: dict | None = None) -> OpticsSettings:
        """Return the optics settings with what is empty filled: first from a parametric part's own design
        (``parameters``: its frequency or band, its focal length), then from the requirements' band and focal
        length. Every way in (the site, the API, the command line, a re-check) gets the same optics for the same
        design and settings."""
        req, optics = self.requirements, self.optics
        own_freqs, own_focal = own_design(parameters)
        freqs = optics.freqs_ghz or own_freqs or (req.band_freqs_ghz() if req is not None else ())
        focal = next((f for f in (optics.focal_length_mm, own_focal, req.focal_length_mm if req is not None else None)
                      if f is not None), None)
        return replace(optics, freqs_ghz=tuple(freqs), focal_length_mm=focal)

    @classmethod
    def from_dict(cls, data: dict | None) -> CheckSettings:
        data = dict(data or {})
        optics = dict(data.get("optics") or {})
        optics["freqs_ghz"] = tuple(float(f) for f in optics.get("freqs_ghz", ()))
        return cls(
            orientation=data.get("orientation", "+z"),
            quantities=tuple(int(q) for q in data.get("quantities", (1, 5, 10, 25))),
            optics=OpticsSettings(**optics),
            requirements=Requirements.from_dict(data["requirements"]) if data.get("requirements") else None,
        )


def own_design(parameters: dict | None) -> tuple[tuple[float, ...], float | None]:
    """Return a parametric part's own design frequencies (its frequency, or five across its band) and focal length
    (None where it has none: a spiral plate, a window); ((), None) for an uploaded mesh."""
    p = parameters or {}
    if p.get("freq_ghz"):
        freqs = (float(p["freq_ghz"]),)
    elif p.get("freq_min_ghz") and p.get("freq_max_ghz"):
        lo, hi = float(p["freq_min_ghz"]), float(p["freq_max_ghz"])
        freqs = tuple(round(lo + i * (hi - lo) / 4, 6) for i in range(5))
    else:
        freqs = ()
    focal = p.get("focal_length_mm")
    return freqs, None if focal is None else float(focal)
