"""What the ``phasewright`` subcommands share: exit codes, frequency parsing, the check options, profiles."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from services import catalogue
from services.cli.requirements import add_requirement_options, requirements_from
from services.errors import UnusableInput
from services.profiles import Material, PrinterProfile
from services.settings import CheckSettings, OpticsSettings

EXIT_OK, EXIT_OTHER, EXIT_UNUSABLE = 0, 1, 2


def parse_freqs(text: str | None) -> tuple[float, ...]:
    """Parse ``140``, ``110,140,170`` or ``110:170:7`` (start:stop:points) into GHz values."""
    if not text:
        return ()
    try:
        if ":" in text:
            start, stop, points = text.split(":")
            n = int(points)
            if n < 1 or n > 201:
                raise ValueError
            if n == 1:
                return (float(start),)
            step = (float(stop) - float(start)) / (n - 1)
            return tuple(round(float(start) + i * step, 6) for i in range(n))
        return tuple(float(v) for v in text.split(","))
    except ValueError:
        raise UnusableInput("bad_frequency", f"Cannot read frequencies {text!r}: give 140, 110,140,170 or 110:170:7 (start:stop:points, 1-201 points).") from None


def add_check_options(p: argparse.ArgumentParser, *, optics: bool = True) -> None:
    """Add the printer, material and settings options shared by ``check`` and ``generate --check``.

    ``generate`` passes ``optics=False``: its own --freq-ghz and --focal-length-mm define the part
    and become the optics settings of the check.
    """
    p.add_argument("--printer", help="printer profile slug from the catalogue")
    p.add_argument("--material", help="material slug from the catalogue")
    p.add_argument("--printer-file", help="JSON file with a printer profile (catalogue fields)")
    p.add_argument("--material-file", help="JSON file with a material (catalogue fields)")
    p.add_argument("--orientation", default="+z", help="build axis of the file: +z (default), -z, +x, -x, +y, -y")
    p.add_argument("--quantity", type=int, action="append", help="quantity to quote (repeatable; default 1 5 10 25)")
    if optics:
        p.add_argument("--freq-ghz", help="design frequencies: 140, 110,140,170 or 110:170:7")
        p.add_argument("--focal-length-mm", type=float, help="intended focal length, from the part's far extreme")
    p.add_argument("--edge-taper-db", type=float, help="Gaussian illumination: edge taper at the rim in dB")
    p.add_argument("--beam-waist-mm", type=float, help="Gaussian illumination: waist radius in mm at the part")
    p.add_argument("--clear-aperture-mm", type=float,
                   help="diameter of the optical zone about the axis (default: the generator's, else detected)")
    p.add_argument("--format", choices=("text", "json"), default="text")
    p.add_argument("--out", help="folder to write each report's JSON, pictures and Touchstone file into")
    add_requirement_options(p, generate=not optics)


def resolve_printer(args) -> PrinterProfile:
    if args.printer_file:
        return PrinterProfile.from_dict(_read_json(args.printer_file))
    if not args.printer:
        raise UnusableInput("no_printer", "Choose a printer with --printer SLUG (see `phasewright printers`) or --printer-file.")
    return catalogue.printer(args.printer)


def resolve_material(args) -> Material:
    if args.material_file:
        return Material.from_dict(_read_json(args.material_file))
    if not args.material:
        raise UnusableInput("no_material", "Choose a material with --material SLUG (see `phasewright materials`) or --material-file.")
    return catalogue.material(args.material)


def settings_from(args) -> CheckSettings:
    optics = OpticsSettings(freqs_ghz=parse_freqs(args.freq_ghz), focal_length_mm=args.focal_length_mm,
                            edge_taper_db=args.edge_taper_db, beam_waist_mm=args.beam_waist_mm,
                            clear_aperture_mm=getattr(args, "clear_aperture_mm", None))
    return CheckSettings(orientation=args.orientation, quantities=tuple(args.quantity or (1, 5, 10, 25)), optics=optics,
                         requirements=requirements_from(args))


def _read_json(path: str) -> dict:
    try:
        return json.loads(Path(path).read_text())
    except (OSError, ValueError) as exc:
        raise UnusableInput("bad_json", f"{path}: cannot read it as JSON ({exc}).") from None


def print_results(results: list[dict], fmt: str) -> None:
    """Print reports as JSON (one object, or a list in input order) or as short text blocks."""
    if fmt == "json":
        print(json.dumps(results[0] if len(results) == 1 else results, indent=2))
        return
    from services.render.text import report_text

    for r in results:
        print(f"{r['path']}: ERROR: {without_name(r['error'], r['path'])}" if "error" in r else report_text(r))


def without_name(sentence: str, path: str) -> str:
    """Return an error's sentence without the file's name it starts with, for a line that names the file already
    (intake starts its sentences with the name, for the logs and the CSV that carry them alone)."""
    for name in (path, Path(path).name):
        if sentence.startswith(f"{name}: "):
            return sentence[len(name) + 2:]
    return sentence
