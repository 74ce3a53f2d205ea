"""Printer profiles and materials as frozen snapshots: what a check ran against.

The lab manager edits these in the web app; the domain core only ever sees a snapshot, so a
report can be recomputed and never changes when a profile is edited later.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, fields

from services.errors import UnusableInput

# ISO/ASTM 52900 process categories we model, and the technologies inside them.
PROCESSES = {
    "vat_photopolymerisation": ("lcd_masked", "projector_masked", "laser_scanned"),
    "material_extrusion": ("filament",),
    "material_jetting": ("jetting",),
}


@dataclass(frozen=True, slots=True)
class PrinterProfile:
    """One printer as the lab runs it.

    ``rules`` maps a rule name to its limits, e.g.
    ``{"min_feature": {"supported_mm": 0.15, "unsupported_mm": 0.3, "severity": "blocker"}}``;
    a rule with ``"enabled": False`` is switched off; a missing limit makes the rule say so.
    ``time_model`` holds the constants of the process's print-time model and ``cost`` the
    machine rate, labour and margin (see ``services.estimate``).
    """

    slug: str
    name: str
    process: str
    technology: str
    pixel_mm: float
    layer_height_mm: float
    layer_heights_mm: tuple[float, ...]
    build_volume_mm: tuple[float, float, float]
    xy_accuracy_mm: float = 0.05
    z_accuracy_mm: float = 0.05
    rules: dict = field(default_factory=dict)
    time_model: dict = field(default_factory=dict)
    cost: dict = field(default_factory=dict)
    sources: dict = field(default_factory=dict)
    notes: str = ""
    version: int = 1

    def rule(self, name: str) -> dict | None:
        """Return the limits of one rule, or None when the profile switches it off."""
        limits = self.rules.get(name, {})
        if limits.get("enabled", True) is False:
            return None
        return limits

    def to_dict(self) -> dict:
        d = asdict(self)
        d["layer_heights_mm"] = list(self.layer_heights_mm)
        d["build_volume_mm"] = list(self.build_volume_mm)
        return d

    @classmethod
    def from_dict(cls, data: dict) -> PrinterProfile:
        """Build a profile from catalogue or API data, refusing what cannot be a printer."""
        d = _known_fields(cls, data, "printer profile")
        d["layer_heights_mm"] = tuple(float(v) for v in d.get("layer_heights_mm") or (d["layer_height_mm"],))
        d["build_volume_mm"] = tuple(float(v) for v in d["build_volume_mm"])
        profile = cls(**d)
        _validate_profile(profile)
        return profile


@dataclass(frozen=True, slots=True)
class RFPoint:
    """Permittivity and loss tangent at one frequency, with where the value comes from."""

    freq_ghz: float
    eps_r: float
    tan_delta: float
    source: str


@dataclass(frozen=True, slots=True)
class Material:
    """A printable (or machined reference) material: mechanical, cost and RF data.

    ``price`` is per ``price_unit`` ("kg" or "l") in ``currency``; ``rf`` is sorted by frequency.
    ``band_ghz`` is the band the material is usually designed for (e.g. W band, 75-110 GHz): a check
    given no frequency and no required band runs across it.
    """

    slug: str
    name: str
    kind: str
    processes: tuple[str, ...]
    density_g_cm3: float
    price: float
    price_unit: str
    currency: str
    waste_factor: float
    rf: tuple[RFPoint, ...]
    sources: dict = field(default_factory=dict)
    notes: str = ""
    version: int = 1
    band_ghz: tuple[float, float] | None = None

    def to_dict(self) -> dict:
        d = asdict(self)
        d["processes"] = list(self.processes)
        d["rf"] = [asdict(p) for p in self.rf]
        d["band_ghz"] = list(self.band_ghz) if self.band_ghz else None
        return d

    @classmethod
    def from_dict(cls, data: dict) -> Material:
        """Build a material from catalogue or API data, refusing impossible values."""
        d = _known_fields(cls, data, "material")
        d["processes"] = tuple(d.get("processes") or ())
        d["rf"] = tuple(sorted((RFPoint(**p) for p in d.get("rf") or ()), key=lambda p: p.freq_ghz))
        d["band_ghz"] = _band(d.get("band_ghz"), d.get("slug"))
        material = cls(**d)
        _validate_material(material)
        return material


def _known_fields(cls, data: dict, what: str) -> dict:
    names = {f.name for f in fields(cls)}
    unknown = sorted(set(data) - names)
    if unknown:
        raise UnusableInput("unknown_field", f"The {what} has unknown fields: {', '.join(unknown)}.")
    return dict(data)


def _band(value, slug) -> tuple[float, float] | None:
    """Return a band as (low, high) GHz, refusing anything but two increasing positive numbers."""
    if not value:
        return None
    try:
        lo, hi = (float(v) for v in value)
    except (TypeError, ValueError):
        raise UnusableInput("bad_material", f"Material {slug!r}: the band must be two frequencies in GHz, "
                            "low then high, e.g. [75, 110].") from None
    if not 0 < lo < hi:
        raise UnusableInput("bad_material", f"Material {slug!r}: the band {lo:g}-{hi:g} GHz must have a positive "
                            "low end below its high end.")
    return lo, hi


def _validate_profile(p: PrinterProfile) -> None:
    if p.technology not in PROCESSES.get(p.process, ()):
        raise UnusableInput("bad_profile", f"Printer profile {p.slug!r}: technology {p.technology!r} is not a kind of {p.process!r}.")
    if not (0 < p.pixel_mm <= 2 and 0 < p.layer_height_mm <= 2):
        raise UnusableInput("bad_profile", f"Printer profile {p.slug!r}: pixel and layer height must be between 0 and 2 mm.")
    if min(p.build_volume_mm) <= 0:
        raise UnusableInput("bad_profile", f"Printer profile {p.slug!r}: every build-volume side must be positive.")


def _validate_material(m: Material) -> None:
    if m.density_g_cm3 <= 0 or m.price < 0 or not (0 <= m.waste_factor < 1):
        raise UnusableInput("bad_material", f"Material {m.slug!r}: density must be positive, price not negative, waste factor in [0, 1).")
    for p in m.rf:
        if p.eps_r < 1 or p.tan_delta < 0:
            raise UnusableInput("bad_material", f"Material {m.slug!r}: permittivity below 1 or negative loss tangent at {p.freq_ghz} GHz.")


def check_pairing(printer: PrinterProfile, material: Material) -> None:
    """Refuse a material the printer's process cannot print (e.g. a filament on a resin printer)."""
    if printer.process in material.processes:
        return
    if not material.processes:
        raise UnusableInput("material_not_printable",
                            f"{material.name} is a reference material that is not "
                            f"printed; choose a printable material for {printer.name}.")
    raise UnusableInput("material_mismatch",
                        f"{material.name} is not made for {printer.process.replace('_', ' ')}; "
                        f"choose a material for {printer.name}.")
