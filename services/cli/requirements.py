"""The command line's requirement options and ``--requirements FILE`` (a JSON object of Requirements fields).

Options given on the command line override the file's values for the same target.
"""

from __future__ import annotations

import json
from pathlib import Path

from services.errors import UnusableInput
from services.requirements import LOSS_BASES, Requirements, requirements_with_defaults

# Flag -> (Requirements field, help)
_OPTIONS = {
    "--max-loss-db": ("max_insertion_loss_db", "required: largest insertion loss in dB"),
    "--max-spot-ratio": ("max_spot_fwhm_ratio", "required: largest spot FWHM at the design focal plane over "
                                                "the diffraction limit (e.g. 1.2)"),
    "--min-efficiency": ("min_focusing_efficiency", "required: smallest focusing efficiency (0-1)"),
    "--min-strehl": ("min_strehl", "required: smallest Strehl ratio (0-1)"),
    "--require-focal-mm": ("focal_length_mm", "required: focal length in mm, from the part's far extreme"),
    "--focal-tolerance-mm": ("focal_tolerance_mm", "required: +- tolerance of that focal length in mm"),
    "--max-thickness-mm": ("max_thickness_mm", "required: largest thickness along the axis in mm"),
    "--max-diameter-mm": ("max_diameter_mm", "required: largest diameter in mm"),
    "--min-mode-purity": ("min_mode_purity", "required, vortex plates: smallest mode purity (0-1)"),
}


def add_requirement_options(p, *, generate: bool = False) -> None:
    """Add the requirement flags; ``generate`` also offers the demo lab's defaults for the kind."""
    group = p.add_argument_group("requirements", "targets the part must meet; checked as designed and as printed")
    group.add_argument("--requirements", metavar="FILE", help="JSON file of requirements (see the README)")
    group.add_argument("--band-ghz", help="required band, low:high in GHz (e.g. 130:150)")
    group.add_argument("--loss-basis", choices=LOSS_BASES, help="insertion loss per frequency (default) or "
                                                                "over the band")
    group.add_argument("--f-number-range", help="required f-number range, low:high (e.g. 0.8:1.5)")
    for flag, (dest, text) in _OPTIONS.items():
        group.add_argument(flag, dest=f"req_{dest}", type=float, help=text)
    if generate:
        group.add_argument("--demo-requirements", action="store_true",
                           help="start from the demo lab's default targets for this kind (invented, labelled so)")


def requirements_from(args, *, kind: str | None = None, params: dict | None = None) -> Requirements | None:
    """Return the requirements the flags and file state, or None when nothing is stated."""
    explicit = _read(args.requirements) if args.requirements else {}
    explicit.update(_flags(args))
    return requirements_with_defaults(explicit, kind=kind, params=params,
                                      use_defaults=getattr(args, "demo_requirements", False))


def _flags(args) -> dict:
    out = {dest: getattr(args, f"req_{dest}") for dest, _ in _OPTIONS.values() if getattr(args, f"req_{dest}") is not None}
    if args.band_ghz:
        out["band_ghz"] = _pair(args.band_ghz, "--band-ghz")
    if args.f_number_range:
        out["f_number_min"], out["f_number_max"] = _pair(args.f_number_range, "--f-number-range")
    if args.loss_basis:
        out["loss_basis"] = args.loss_basis
    return out


def _pair(text: str, flag: str) -> list[float]:
    try:
        lo, hi = (float(v) for v in text.replace(",", ":").split(":"))
    except ValueError:
        raise UnusableInput("bad_requirement", f"{flag} takes two numbers, low:high, not {text!r}.") from None
    return [lo, hi]


def _read(path: str) -> dict:
    try:
        data = json.loads(Path(path).read_text())
    except (OSError, ValueError) as exc:
        raise UnusableInput("bad_json", f"{path}: cannot read it as JSON ({exc}).") from None
    if not isinstance(data, dict):
        raise UnusableInput("bad_requirement", f"{path}: the requirements must be one JSON object of targets.")
    return data
