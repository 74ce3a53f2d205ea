"""``phasewright generate KIND --PARAM VALUE ... -o part.stl|part.3mf [--check]``."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from services.errors import UnusableInput


def add_generate_parser(sub) -> None:
    """Add ``generate`` with one sub-command per component kind, its flags from the kind's parameters."""
    from services.components import KINDS, component_parameters
    from services.cli.common import add_check_options

    gen = sub.add_parser("generate", help="build a parametric part (lens, phase plate, ...) as a mesh")
    kinds = gen.add_subparsers(dest="kind", required=True)
    for kind in KINDS:
        p = kinds.add_parser(kind, help=f"generate a {kind} part")
        for spec in component_parameters(kind):
            if spec.name in ("material", "printer"):
                continue
            flag = "--" + spec.name.replace("_", "-")
            # argparse formats help with %: a literal "1 %" would print the option's internals.
            text = spec.help.replace("%", "%%")
            shown = text if spec.default is None else f"{text} (default {spec.default})"
            kwargs = {"dest": spec.name, "default": None, "help": shown}
            if getattr(spec, "choices", None):
                kwargs["choices"] = list(spec.choices)
            elif isinstance(spec.default, bool):
                kwargs["type"] = _bool
            elif isinstance(spec.default, int):
                kwargs["type"] = int
            elif isinstance(spec.default, float) or spec.default is None:
                kwargs["type"] = float
            p.add_argument(flag, **kwargs)
        p.add_argument("-o", "--output", required=True, help="mesh file to write: .stl or .3mf")
        p.add_argument("--check", action="store_true", help="check the generated part at once")
        add_check_options(p, optics=False)


def _bool(text: str) -> bool:
    if text.lower() in ("1", "true", "yes", "on"):
        return True
    if text.lower() in ("0", "false", "no", "off"):
        return False
    raise argparse.ArgumentTypeError(f"expected true or false, not {text!r}")


def cmd_generate(args) -> int:
    """Build the part, write it, and with --check run the usual check on it."""
    from services import catalogue
    from services.cli.common import EXIT_OK, print_results, resolve_material, resolve_printer
    from services.components import build_component, component_parameters, export_mesh
    from services.report import build_report

    material = resolve_material(args)
    printer = resolve_printer(args) if (args.printer or args.printer_file) else None
    names = [s.name for s in component_parameters(args.kind) if s.name not in ("material", "printer")]
    params = {n: getattr(args, n) for n in names if getattr(args, n) is not None}
    if printer is None and args.check:
        raise UnusableInput("no_printer", "--check needs a printer: add --printer SLUG.")
    volumes = [p.build_volume_mm for p in catalogue.printers()] if printer is None else [printer.build_volume_mm]
    component = build_component(args.kind, {**params, "build_volumes_mm": volumes}, material=material, printer=printer)
    out = Path(args.output)
    fmt = out.suffix.lower().lstrip(".")
    if fmt not in ("stl", "3mf"):
        raise UnusableInput("bad_output", f"{out.name}: write .stl or .3mf.")
    out.write_bytes(export_mesh(component.part, fmt))
    if not args.check:
        print(json.dumps({"path": str(out), "kind": args.kind, "derived": component.derived}, indent=2, default=float)
              if args.format == "json" else f"wrote {out} ({len(component.part.faces):,} triangles)")
        return EXIT_OK
    settings = _check_settings(args, component)
    report = build_report(part=component.part, printer=printer, material=material, settings=settings)
    print_results([{"path": str(out), **report.to_dict()}], args.format)
    return EXIT_OK


def _check_settings(args, component):
    """Return check settings whose optics look at the part's own design frequency (or band) and focus."""
    from services.cli.requirements import requirements_from
    from services.settings import CheckSettings, OpticsSettings, own_design

    params = component.part.parameters or {}
    freqs, _ = own_design(params)
    optics = OpticsSettings(freqs_ghz=freqs, focal_length_mm=component.focal_length_mm,
                            edge_taper_db=args.edge_taper_db, beam_waist_mm=args.beam_waist_mm)
    return CheckSettings(orientation=args.orientation, quantities=tuple(args.quantity or (1, 5, 10, 25)), optics=optics,
                         requirements=requirements_from(args, kind=args.kind, params=params))
