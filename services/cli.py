"""The ``phasewright`` command: check meshes locally, list the catalogue, generate parts.

Exit status: 0 when every input produced a report (whatever the verdict), 2 when any input was
unusable, 1 for anything else.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from services import catalogue
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
    p.add_argument("--format", choices=("text", "json"), default="text")
    p.add_argument("--out", help="folder to write each report's JSON, pictures and Touchstone file into")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="phasewright", description="Check 3D-printed quasi-optical parts before printing.")
    sub = parser.add_subparsers(dest="command", required=True)
    check = sub.add_parser("check", help="check mesh files (STL, 3MF, OBJ, PLY) locally")
    check.add_argument("paths", nargs="+", metavar="PATH")
    check.add_argument("--units", default=None, help="units of unitless files: mm (default), um, cm, m, inch")
    add_check_options(check)
    for name in ("printers", "materials"):
        listing = sub.add_parser(name, help=f"list the starter {name}")
        listing.add_argument("--format", choices=("text", "json"), default="text")
    from services.cli_generate import add_generate_parser

    add_generate_parser(sub)
    from services.batch import add_batch_parser

    add_batch_parser(sub)
    return parser


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
                            edge_taper_db=args.edge_taper_db, beam_waist_mm=args.beam_waist_mm)
    return CheckSettings(orientation=args.orientation, quantities=tuple(args.quantity or (1, 5, 10, 25)), optics=optics)


def _read_json(path: str) -> dict:
    try:
        return json.loads(Path(path).read_text())
    except (OSError, ValueError) as exc:
        raise UnusableInput("bad_json", f"{path}: cannot read it as JSON ({exc}).") from None


def cmd_check(args) -> int:
    from services.checking import check_files

    printer, material, settings = resolve_printer(args), resolve_material(args), settings_from(args)
    results = check_files(args.paths, printer=printer, material=material, settings=settings, units=args.units,
                          out_dir=args.out, on_error=lambda msg: print(f"phasewright: {msg}", file=sys.stderr))
    print_results(results, args.format)
    return EXIT_UNUSABLE if any("error" in r for r in results) else EXIT_OK


def print_results(results: list[dict], fmt: str) -> None:
    """Print reports as JSON (one object, or a list in input order) or as short text blocks."""
    if fmt == "json":
        print(json.dumps(results[0] if len(results) == 1 else results, indent=2))
        return
    from services.text_report import report_text

    for r in results:
        print(f"{r['path']}: ERROR {r['error']}" if "error" in r else report_text(r))


def cmd_listing(args) -> int:
    items = catalogue.printers() if args.command == "printers" else catalogue.materials()
    if args.format == "json":
        print(json.dumps([i.to_dict() for i in items], indent=2))
    else:
        for i in items:
            extra = f"{i.process}, {i.pixel_mm * 1000:g} um pixel, {i.layer_height_mm * 1000:g} um layers" if isinstance(i, PrinterProfile) \
                else f"{i.kind}, {i.density_g_cm3:g} g/cm3, RF data {i.rf[0].freq_ghz:g}-{i.rf[-1].freq_ghz:g} GHz"
            print(f"{i.slug:20s} {i.name} ({extra})")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    handlers = {"check": cmd_check, "printers": cmd_listing, "materials": cmd_listing}
    try:
        if args.command == "generate":
            from services.cli_generate import cmd_generate

            return cmd_generate(args)
        if args.command == "batch":
            from services.batch import cmd_batch

            return cmd_batch(args)
        return handlers[args.command](args)
    except UnusableInput as exc:
        print(f"phasewright: {exc.message}", file=sys.stderr)
        return EXIT_UNUSABLE
    except KeyboardInterrupt:
        return EXIT_OTHER
    except Exception as exc:  # a bug, not the user's input: say so in one line, no traceback
        print(f"phasewright: internal error ({type(exc).__name__}: {exc}); please report it.", file=sys.stderr)
        return EXIT_OTHER


if __name__ == "__main__":
    sys.exit(main())
