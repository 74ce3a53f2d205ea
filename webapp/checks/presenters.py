"""What the designer's pages show, worked out from stored data once per request (no Django here
beyond what the callers pass in): key limits of a profile, material data, the report's tables."""

from __future__ import annotations

from services.render.diff import diff_reports
from services.render.tables import headline, optics_rows, requirement_rows, severity_counts

STAGES = (("reading", "Reading the mesh"), ("slicing", "Slicing into layers"), ("rules", "Checking design rules"),
          ("estimate", "Estimating time and cost"), ("optics", "Predicting the optics"),
          ("views", "Preparing the 3D view"), ("pictures", "Drawing pictures"),
          ("alternatives", "Trying other printers and orientations"))

FAILURE_ADVICE = {
    "time_limit": "Try a coarser printer profile, or split the part; very fine lattices on a large plate take longest.",
    "memory_limit": "Try a coarser printer profile, or split the part; very fine lattices on a large plate take most memory.",
    "worker_lost": "Try again later; if it happens again, the part may be too large for the workers.",
    "internal_error": "Submit the design again; if it fails again, send the file to the lab manager.",
}
DEFAULT_ADVICE = "Fix what the sentence names in your file or settings, then upload it again."


def _fmt(value, unit: str = "", digits: int = 3) -> str:
    if value is None:
        return "not set"
    return f"{float(value):.{digits}g}{(' ' + unit) if unit else ''}"


def printer_facts(snapshot: dict) -> list[tuple[str, str]]:
    """Return the key limits of a printer profile as (label, value) rows, for beside the choice."""
    rules = snapshot.get("rules") or {}
    feature, gap, hole = rules.get("min_feature") or {}, rules.get("min_gap") or {}, rules.get("min_hole") or {}
    volume = snapshot.get("build_volume_mm") or [0, 0, 0]
    cost = snapshot.get("cost") or {}
    return [
        ("Process", f"{str(snapshot.get('process', '')).replace('_', ' ')} ({str(snapshot.get('technology', '')).replace('_', ' ')})"),
        ("Pixel / layer", f"{_fmt(snapshot.get('pixel_mm'), 'mm')} / {_fmt(snapshot.get('layer_height_mm'), 'mm')}"),
        ("Build volume", " × ".join(f"{v:g}" for v in volume) + " mm"),
        ("Smallest feature", f"{_fmt(feature.get('supported_mm'), 'mm')} supported, "
                             f"{_fmt(feature.get('unsupported_mm'), 'mm')} free-standing"),
        ("Smallest gap", f"{_fmt(gap.get('xy_mm'), 'mm')} in xy, {_fmt(gap.get('z_mm'), 'mm')} along z"),
        ("Smallest hole", f"{_fmt(hole.get('along_z_mm'), 'mm')} along z, {_fmt(hole.get('across_z_mm'), 'mm')} across"),
        ("Machine rate", f"{_fmt(cost.get('machine_rate_per_h'), digits=4)} {cost.get('currency', '')}/h"),
    ]


def material_facts(snapshot: dict) -> list[tuple[str, str]]:
    """Return a material's processes, price and RF data as (label, value) rows."""
    rf = snapshot.get("rf") or []
    rf_text = "; ".join(f"{p['freq_ghz']:g} GHz: εr {p['eps_r']:.3g}, tan δ {p['tan_delta']:.2g}" for p in rf[:3])
    return [
        ("Prints on", ", ".join(p.replace("_", " ") for p in snapshot.get("processes") or []) or "reference only"),
        ("Price", f"{_fmt(snapshot.get('price'), digits=4)} {snapshot.get('currency', '')}/{snapshot.get('price_unit', '')}"),
        ("RF data", rf_text or "none"),
    ]


def stage_rows(check) -> list[dict]:
    """Return each pipeline stage with its state (done, current, waiting) for the progress list."""
    names = [name for name, _ in STAGES]
    current = names.index(check.stage) if check.stage in names else (len(names) if check.status == "done" else -1)
    return [{"name": name, "label": label, "state": "done" if i < current else "current" if i == current else "waiting"}
            for i, (name, label) in enumerate(STAGES)]


def can_print(printer, material) -> bool:
    """Return True when the printer's process can print the material (both snapshots)."""
    from services.errors import UnusableInput
    from services.profiles import check_pairing

    try:
        check_pairing(printer, material)
    except UnusableInput:
        return False
    return True


def failure_advice(code: str) -> str:
    return FAILURE_ADVICE.get(code or "", DEFAULT_ADVICE)


def report_context(report: dict) -> dict:
    """Return the tables of the report page, worked out once."""
    findings = report.get("findings") or []
    numbered = [{"number": i, **f} for i, f in enumerate(findings, start=1)]
    figures = report.get("figures") or []
    optics_figures = [name for name in ("optics_loss.png", "optics_focal_plane.png", "optics_fwhm.png",
                                        "optics_phase_map.png") if name in figures]
    optics_figures += [n for n in figures if n.startswith("optics_") and n not in optics_figures]
    if len((report.get("optics") or {}).get("frequencies_ghz") or []) < 2:
        optics_figures = [n for n in optics_figures if n != "optics_fwhm.png"]  # a curve of one point says nothing
    missed = sum(f.get("rule") == "requirement" and f.get("severity") == "blocker" for f in findings)
    return {"findings": numbered, "counts": severity_counts(findings), "targets_missed": missed, "head": headline(report),
            "optics_rows": optics_rows(report.get("optics")), "optics_figures": optics_figures,
            "requirement_rows": requirement_rows(report),
            "requirements_source": (report.get("requirements") or {}).get("source"),
            "views": [name for name in ("perspective.png", "thickness_map.png") if name in figures]}


def comparison(checks: list) -> dict:
    """Return the side-by-side table of finished checks and, for two, what changed from the first."""
    columns = [{"check": c, "head": headline(c.report)} for c in checks]
    quantities = sorted({q for col in columns for q in col["head"]["quantities"]})
    diff = diff_reports(checks[0].report, checks[1].report) if len(checks) == 2 else None
    return {"columns": columns, "quantities": quantities, "diff": diff}
