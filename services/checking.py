"""Check files from disk with no server and no database: what the CLI's ``check`` does."""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path

from services.errors import UnusableInput
from services import limits as run_limits
from services.intake import IntakeLimits, read_part
from services.profiles import Material, PrinterProfile
from services.report import Report, build_report
from services.settings import CheckSettings
from services.sizes import over_limit_text


def check_file(path: str, *, printer: PrinterProfile, material: Material, settings: CheckSettings,
               units: str | None = None, limits: IntakeLimits = IntakeLimits(), concurrent_stages: bool = True) -> Report:
    """Read one mesh file and return its report; UnusableInput when the file cannot be checked."""
    p = Path(path)
    try:
        size = p.stat().st_size
    except OSError:
        raise UnusableInput("no_file", f"{p.name}: no such file.") from None
    if size > limits.max_bytes:
        raise UnusableInput("too_large", f"{p.name}: {over_limit_text(size, limits.max_bytes)}.")
    from services import catalogue

    def pairs():
        return [(pr, m) for pr in catalogue.printers() for m in catalogue.materials()]

    return build_report(part=read_part(p.read_bytes(), name=p.name, units=units, limits=limits),
                        printer=printer, material=material, settings=settings, alternatives=pairs,
                        concurrent_stages=concurrent_stages)


def write_report_files(report: Report, folder: Path) -> None:
    """Write report.json, the pictures and the Touchstone file (if any) into ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "report.json").write_text(json.dumps(report.to_dict(), indent=2))
    for name, png in report.figures.items():
        (folder / name).write_bytes(png)
    if report.touchstone:
        (folder / "transmission.s2p").write_text(report.touchstone)


def _limited_check(path: str, *, time_limit_s: int, memory_limit_mib: int, **kwargs) -> Report:
    """Check one file under a time limit; a limit reached becomes an UnusableInput that names it."""
    name = Path(path).name
    try:
        with run_limits.time_limit(time_limit_s):
            return check_file(path, **kwargs)
    except run_limits.TimeLimitReached:
        raise UnusableInput("time_limit", run_limits.time_limit_sentence(
            time_limit_s, name=name, raise_hint="raise it with --time-limit-s")) from None
    except MemoryError:
        raise UnusableInput("memory_limit", run_limits.memory_limit_sentence(
            memory_limit_mib, name=name, raise_hint="raise it with --memory-limit-mib")) from None


def check_files(paths: list[str], *, printer: PrinterProfile, material: Material, settings: CheckSettings,
                units: str | None = None, out_dir: str | None = None, time_limit_s: int = 0,
                memory_limit_mib: int = 0, on_error: Callable[[str], None] | None = None,
                concurrent_stages: bool = True) -> list[dict]:
    """Check every path in order; a bad file gives {"path", "error"} and never stops the others.

    ``time_limit_s`` bounds each file (0: none); ``memory_limit_mib`` only names the cap the caller set;
    ``concurrent_stages`` False runs rules and optics one after the other (see build_report).
    """
    results = []
    for i, path in enumerate(paths):
        try:
            report = _limited_check(path, time_limit_s=time_limit_s, memory_limit_mib=memory_limit_mib,
                                    printer=printer, material=material, settings=settings, units=units,
                                    concurrent_stages=concurrent_stages)
        except UnusableInput as exc:
            results.append({"path": path, "error": exc.message, "code": exc.code})
            if on_error:
                on_error(exc.message)
            continue
        if out_dir:
            write_report_files(report, Path(out_dir) / f"{i + 1:03d}-{Path(path).stem}")
        results.append({"path": path, **report.to_dict()})
    return results
