"""The parameters of each component kind: names, units, defaults and limits, and their validation.

One table drives the CLI flags, the web form and the checks here, so the three never disagree.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from services.errors import UnusableInput

KINDS = ("plano-convex", "zoned", "multilevel", "graded-index", "spiral", "window")

# Keys a caller may add besides a kind's parameters: build volumes to check the part against.
EXTRA_KEYS = ("build_volumes_mm",)


@dataclass(frozen=True, slots=True)
class ParamSpec:
    """One parameter of a component kind.

    ``type`` is "float", "int" or "choice"; a float default of None means "worked out from the
    others" (the help says how). ``min``/``max`` are inclusive unless ``min_exclusive``.
    """

    name: str
    unit: str
    default: float | int | str | None
    help: str
    type: str = "float"
    min: float | None = None
    max: float | None = None
    min_exclusive: bool = False

    @property
    def spoken(self) -> str:
        """Return the parameter's name in words, as the messages and forms say it ("The base thickness")."""
        return spoken_name(self.name)
    choices: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        d = asdict(self)
        d["choices"] = list(self.choices)
        return d


def _size(name: str, default: float | None, help: str, *, positive: bool = True) -> ParamSpec:
    return ParamSpec(name, "mm", default, help, min=0.0, min_exclusive=positive)


def _freq(name: str, default: float | None, help: str) -> ParamSpec:
    return ParamSpec(name, "GHz", default, help, min=0.0, max=10_000.0, min_exclusive=True)


_FLANGE = (
    _size("flange_width_mm", 0.0, "radial width of a flat mounting flange around the aperture (0: none)", positive=False),
    _size("flange_thickness_mm", 2.0, "thickness of the mounting flange"),
)

_SPECS: dict[str, tuple[ParamSpec, ...]] = {
    "plano-convex": (
        _size("diameter_mm", 50.0, "aperture diameter of the lens"),
        _size("focal_length_mm", 100.0, "distance from the lens vertex to the focus (f/D at least 0.5)"),
        _freq("freq_ghz", 100.0, "design frequency; the material's index is taken here"),
        _size("base_thickness_mm", 1.0, "thickness at the rim of the lens, under the hyperbolic surface"),
        *_FLANGE,
    ),
    "zoned": (
        _size("diameter_mm", 60.0, "aperture diameter of the lens"),
        _size("focal_length_mm", 72.0, "distance from the central zone's vertex to the focus (f/D at least 0.5)"),
        _freq("freq_ghz", 140.0, "design frequency; the material's index is taken here"),
        _size("min_thickness_mm", 1.0, "thickness of the lens at the foot of every zone step"),
        *_FLANGE,
    ),
    "multilevel": (
        ParamSpec("profile", "", "lens", "phase profile: a focusing lens or a linear ramp (beam deflector)",
                  type="choice", choices=("lens", "deflector")),
        ParamSpec("levels", "", 4, "number of phase levels N per 2 pi", type="int", min=2, max=16),
        _size("diameter_mm", 50.0, "aperture diameter of the plate"),
        _size("focal_length_mm", 100.0, "lens profile: distance from the plate's top to the focus (f/D at least 0.5)"),
        ParamSpec("deflection_deg", "deg", 20.0, "deflector profile: angle the beam is turned by, towards +x",
                  min=0.0, max=80.0, min_exclusive=True),
        _freq("freq_ghz", 100.0, "design frequency; the material's index is taken here"),
        _size("base_thickness_mm", 1.0, "solid thickness under the lowest level"),
        *_FLANGE,
    ),
    "graded-index": (
        _size("diameter_mm", 30.0, "aperture diameter of the plate"),
        _size("focal_length_mm", 30.0, "distance from the plate's top to the focus (f/D at least 0.5)"),
        # Defaults the starter resin printers can make: at 300 GHz no starter printer makes cells fine enough.
        _freq("freq_ghz", 100.0, "design frequency; the phase map is designed here"),
        _freq("max_freq_ghz", None, "highest frequency of use, which sets the largest period (default: the design frequency)"),
        ParamSpec("lattice", "", "square", "arrangement of the cells", type="choice", choices=("square", "hex")),
        ParamSpec("cell", "", "hole", "pillars standing on a base, or blind holes in a slab",
                  type="choice", choices=("pillar", "hole")),
        _size("period_mm", None, "cell period (default: p n / lambda = 0.5 at the highest frequency, where the cell "
              "models are accurate, if the printer can make cells that fine; at most the diffraction limit)"),
        _size("height_mm", None, "pillar height or hole depth (default: enough for a full 2 pi of phase, by the "
              "rigorous cell table the check uses)"),
        _size("base_thickness_mm", 1.0, "solid base under the pillars or under the holes (holes: 0 cuts them through)",
              positive=False),
        _size("flange_width_mm", 1.0, "solid rim of the base outside the aperture", positive=False),
    ),
    "spiral": (
        _size("diameter_mm", 30.0, "diameter of the plate"),
        _freq("freq_ghz", 150.0, "design frequency; the material's index is taken here"),
        ParamSpec("charge", "", 1, "topological charge l (sign sets the handedness; not 0)", type="int", min=-32, max=32),
        ParamSpec("steps", "", 0, "number of flat steps per turn (0: a continuous ramp)", type="int", min=0, max=256),
        _size("base_thickness_mm", 1.0, "solid thickness under the lowest point of the ramp"),
        *_FLANGE,
    ),
    "window": (
        _size("diameter_mm", 50.0, "diameter of the window"),
        _freq("freq_min_ghz", 130.0, "lowest frequency of the band"),
        _freq("freq_max_ghz", 150.0, "highest frequency of the band; the centre of the band is the design frequency"),
        ParamSpec("matching", "", "none", "quarter-wave matching layer on each face: none, subwavelength grooves "
                  "or pyramids", type="choice", choices=("none", "grooves", "pyramids")),
        _size("thickness_mm", None, "thickness of the solid core (default: the thinnest half-wave multiple of at least 1 mm)"),
        _size("period_mm", None, "period of the grooves or pyramids (default: the largest that keeps every "
              "diffraction order evanescent at the top of the band)"),
        ParamSpec("groove_field", "", "along", "grooves: the electric field runs along the grooves or across them",
                  type="choice", choices=("along", "across")),
        _size("pyramid_height_mm", None, "pyramids: height (default: the lowest that keeps the reflection of each "
              "face below 1 % across the band)"),
    ),
}


def component_parameters(kind: str) -> list[ParamSpec]:
    """Return the parameters of a component kind, in the order a form shows them."""
    return list(_specs_of(kind))


def resolve_parameters(kind: str, params: dict) -> dict:
    """Return every parameter of the kind, defaults filled in, each checked against its limits."""
    specs = _specs_of(kind)
    names = {s.name for s in specs}
    unknown = sorted(set(params) - names - set(EXTRA_KEYS))
    if unknown:
        raise UnusableInput("unknown_parameter", f"A {kind} part has no parameter {', '.join(unknown)}; "
                            f"it takes {', '.join(s.name for s in specs)}.")
    resolved = {s.name: _value(s, params.get(s.name, s.default)) for s in specs}
    if params.get("build_volumes_mm") is not None:
        resolved["build_volumes_mm"] = _volumes(params["build_volumes_mm"])
    return resolved


_UNIT_SUFFIXES = ("_mm", "_ghz", "_deg", "_db", "_rad")
_WORDS = {"freq": "frequency", "num": "number of", "n": "number of", "levels": "number of levels"}
_EXTREMES = {"max": "maximum", "min": "minimum"}
_FREQ_EXTREMES = {"max": "highest", "min": "lowest"}  # a band has a highest frequency, not a maximum one


def spoken_name(name: str) -> str:
    """Return a parameter name in words: "base_thickness_mm" -> "The base thickness"."""
    for suffix in _UNIT_SUFFIXES:
        if name.endswith(suffix):
            name = name[: -len(suffix)]
            break
    parts = name.split("_")
    extremes = [(_FREQ_EXTREMES if "freq" in parts else _EXTREMES)[w] for w in parts if w in _EXTREMES]
    words = " ".join([*extremes, *(_WORDS.get(w, w) for w in parts if w not in _EXTREMES)])
    return "The " + words


def _specs_of(kind: str) -> tuple[ParamSpec, ...]:
    if kind not in _SPECS:
        raise UnusableInput("unknown_kind", f"There is no component kind {kind!r}; choose one of {', '.join(KINDS)}.")
    return _SPECS[kind]


def _value(spec: ParamSpec, raw):
    if raw is None:
        if spec.default is None:
            return None
        raw = spec.default
    if spec.type == "choice":
        if raw not in spec.choices:
            raise UnusableInput("bad_parameter", f"{spec.spoken} must be one of {', '.join(spec.choices)}, not {raw!r}.")
        return raw
    value = _number(spec, raw)
    _check_range(spec, value)
    return value


def _number(spec: ParamSpec, raw) -> float | int:
    try:
        value = float(raw)
    except (TypeError, ValueError):
        raise UnusableInput("bad_parameter", f"{spec.spoken} must be a number, not {raw!r}.") from None
    if not math.isfinite(value):
        raise UnusableInput("bad_parameter", f"{spec.spoken} must be a finite number.")
    if spec.type == "int":
        if value != int(value) or isinstance(raw, bool):
            raise UnusableInput("bad_parameter", f"{spec.spoken} must be a whole number, not {raw!r}.")
        return int(value)
    return value


def _check_range(spec: ParamSpec, value: float) -> None:
    unit = f" {spec.unit}" if spec.unit else ""
    if spec.min is not None and (value < spec.min or (spec.min_exclusive and value <= spec.min)):
        word = "greater than" if spec.min_exclusive else "at least"
        raise UnusableInput("bad_parameter", f"{spec.spoken} must be {word} {spec.min:g}{unit}; got {value:g}{unit}.")
    if spec.max is not None and value > spec.max:
        raise UnusableInput("bad_parameter", f"{spec.spoken} must be at most {spec.max:g}{unit}; got {value:g}{unit}.")


def _volumes(raw) -> list[tuple[float, float, float]]:
    try:
        volumes = [tuple(float(v) for v in box) for box in raw]
    except (TypeError, ValueError):
        raise UnusableInput("bad_parameter", "The build volumes must be a list of (x, y, z) sizes in mm.") from None
    if any(len(box) != 3 or min(box) <= 0 for box in volumes):
        raise UnusableInput("bad_parameter", "Every build volume needs three positive sizes in mm.")
    return volumes
