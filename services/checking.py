"""Check files from disk with no server and no database: what the CLI's ``check`` does."""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path

from services.errors import UnusableInput
from services.intake import IntakeLimits, read_part
from services.profiles import Material, PrinterProfile
from services.report import Report, build_report
from services.settings import CheckSettings


def check_file(path: str, *, printer: PrinterProfile, material: Material, settings: CheckSettings,
               units: str | None = None, limits: IntakeLimits = IntakeLimits()) -> Report:
    """Read one mesh file and return its report; UnusableInput when the file cannot be checked."""
    p = Path(path)
    try:
        size = p.stat().st_size
    except OSError:
        raise UnusableInput("no_file", f"{p.name}: no such file.") from None
    if size > limits.max_bytes:
        raise UnusableInput("too_large", f"{p.name}: {size / 2**20:.0f} MB is over the {limits.max_bytes / 2**20:.0f} MB limit.")
    return build_report(part=read_part(p.read_bytes(), name=p.name, units=units, limits=limits),
                        printer=printer, material=material, settings=settings)


def write_report_files(report: Report, folder: Path) -> None:
    """Write report.json, the pictures and the Touchstone file (if any) into ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "report.json").write_text(json.dumps(report.to_dict(), indent=2))
    for name, png in report.figures.items():
        (folder / name).write_bytes(png)
    if report.touchstone:
        (folder / "transmission.s2p").write_text(report.touchstone)


def check_files(paths: list[str], *, printer: PrinterProfile, material: Material, settings: CheckSettings,
                units: str | None = None, out_dir: str | None = None,
                on_error: Callable[[str], None] | None = None) -> list[dict]:
    """Check every path in order; a bad file gives {"path", "error"} and never stops the others."""
    results = []
    for i, path in enumerate(paths):
        try:
            report = check_file(path, printer=printer, material=material, settings=settings, units=units)
        except UnusableInput as exc:
            results.append({"path": path, "error": exc.message, "code": exc.code})
            if on_error:
                on_error(exc.message)
            continue
        if out_dir:
            write_report_files(report, Path(out_dir) / f"{i + 1:03d}-{Path(path).stem}")
        results.append({"path": path, **report.to_dict()})
    return results
