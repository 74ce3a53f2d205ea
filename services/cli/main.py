"""The ``phasewright`` command: check meshes locally, list the catalogue, generate parts.

Exit status: 0 when every input produced a report (whatever the verdict), 2 when any input was
unusable, 1 for anything else.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from services import catalogue, limits
from services.cli.batch import add_batch_parser, cmd_batch
from services.cli.common import (EXIT_OK, EXIT_OTHER, EXIT_UNUSABLE, add_check_options, print_results,
                                 resolve_material, resolve_printer, settings_from)
from services.cli.generate import add_generate_parser, cmd_generate
from services.errors import UnusableInput
from services.optics.materials import rf_coverage_text
from services.profiles import PrinterProfile

def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="phasewright", description="Check 3D-printed quasi-optical parts before printing.")
    sub = parser.add_subparsers(dest="command", required=True)
    check = sub.add_parser("check", help="check mesh files (STL, 3MF, OBJ, PLY) locally")
    check.add_argument("paths", nargs="+", metavar="PATH")
    check.add_argument("--units", default=None, help="units of unitless files: mm (default), um, cm, m, inch")
    check.add_argument("--memory-limit-mib", type=int, default=limits.DEFAULT_MEMORY_MIB,
                       help=f"memory a check may add to this process, in MiB (default {limits.DEFAULT_MEMORY_MIB}, "
                            "as the worker; 0: no limit)")
    check.add_argument("--time-limit-s", type=int, default=limits.DEFAULT_TIME_LIMIT_S,
                       help=f"time each file's check may take, in seconds (default {limits.DEFAULT_TIME_LIMIT_S}, "
                            "as the worker; 0: no limit)")
    check.add_argument("--sequential-stages", action="store_true",
                       help="run design rules and optics one after the other, not side by side (less memory, one core)")
    add_check_options(check)
    for name in ("printers", "materials"):
        listing = sub.add_parser(name, help=f"list the starter {name}")
        listing.add_argument("--format", choices=("text", "json"), default="text")
    add_generate_parser(sub)
    add_batch_parser(sub)
    return parser


def cmd_check(args) -> int:
    from services.checking import check_files

    printer, material, settings = resolve_printer(args), resolve_material(args), settings_from(args)
    if not args.sequential_stages:
        from services.stages import prepare_threads

        prepare_threads()  # mapped before the bound, as in the worker
    with limits.memory_limit(args.memory_limit_mib):
        results = check_files(args.paths, printer=printer, material=material, settings=settings, units=args.units,
                              out_dir=args.out, time_limit_s=args.time_limit_s, memory_limit_mib=args.memory_limit_mib,
                              on_error=lambda msg: print(f"phasewright: {msg}", file=sys.stderr),
                              concurrent_stages=not args.sequential_stages)
    print_results(results, args.format)
    return EXIT_UNUSABLE if any("error" in r for r in results) else EXIT_OK


def cmd_listing(args) -> int:
    items = catalogue.printers() if args.command == "printers" else catalogue.materials()
    if args.format == "json":
        print(json.dumps([i.to_dict() for i in items], indent=2))
    else:
        for i in items:
            extra = f"{i.process}, {i.pixel_mm * 1000:g} um pixel, {i.layer_height_mm * 1000:g} um layers" if isinstance(i, PrinterProfile) \
                else f"{i.kind}, {i.density_g_cm3:g} g/cm3, {rf_coverage_text(i)}"
            print(f"{i.slug:20s} {i.name} ({extra})")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    handlers = {"check": cmd_check, "printers": cmd_listing, "materials": cmd_listing}
    try:
        if args.command == "generate":
            return cmd_generate(args)
        if args.command == "batch":
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
