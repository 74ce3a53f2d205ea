"""Tables drawn from a stored report dict, shared by the web page, the PDF and the comparisons.

A report stores its optics per frequency as parallel lists (JSON-friendly); people read rows.
Everything here takes the dict of ``Report.to_dict()`` and returns plain rows, never raising on an
older or partial report (a missing value is None and shows as a dash).
"""

from __future__ import annotations

from services.findings import RULE_LABELS, rule_label  # noqa: F401 (the pages and PDF read them here)
from services.numbers_text import significant
from services.requirement_check import value_text

SEVERITY_ORDER = ("blocker", "caution", "note")

VERDICT_LABELS = {"printable": "Printable", "printable_with_cautions": "Printable with cautions",
                  "not_printable": "Not printable"}


MEETS_LABELS = {"yes": "Meets its requirements", "no": "Misses its requirements",
                "not_evaluated": "Not all targets evaluated", "not_stated": "No requirements stated"}
STATUS_LABELS = {"met": "met", "missed": "missed as designed", "lost_in_printing": "lost in printing",
                 "not_evaluated": "not evaluated"}

QUOTE_LABELS = {
    "material": "Material", "machine_time": "Machine time", "setup_labour": "Set-up labour",
    "post_processing_build": "Post-processing per build", "post_processing_part": "Post-processing per part",
    "consumables": "Consumables", "failure_allowance": "Failure allowance", "margin": "Margin",
}


def quote_label(item: str) -> str:
    """Return the display name of a quote line item."""
    return QUOTE_LABELS.get(item, item.replace("_", " ").capitalize())


def _at(values, i: int):
    try:
        return values[i]
    except (IndexError, KeyError, TypeError):
        return None


def _focus_at(focus: dict | None, i: int) -> dict:
    """Return the focus metrics at frequency index i (empty when no intended focus was given)."""
    if not focus:
        return {}
    fwhm = _at(focus.get("fwhm_mm"), i)
    return {"best_focus_mm": _at(focus.get("best_focus_mm"), i),
            "wavefront_focus_mm": _at(focus.get("wavefront_focus_mm"), i), "strehl": _at(focus.get("strehl"), i),
            "fwhm_mm": (sum(fwhm) / len(fwhm)) if fwhm else None, "fwhm_ratio": _at(focus.get("fwhm_ratio"), i),
            "focusing_efficiency": _at(focus.get("focusing_efficiency"), i)}


def _vortex_at(vortex: dict | None, i: int) -> dict | None:
    """Return a spiral plate's vortex at frequency index i, as designed and as printed (None for other parts)."""
    if not vortex:
        return None
    keys = ("mode_purity", "ring_radius_mm", "null_depth_db")
    return {side: {key: _at((vortex.get(side) or {}).get(key), i) for key in keys}
            for side in ("as_designed", "as_printed")} | {"distance_mm": _at(vortex.get("distance_mm"), i)}


def optics_rows(optics: dict | None) -> list[dict]:
    """Return one row per design frequency: material data, then as-designed and as-printed values."""
    if not optics:
        return []
    designed = optics.get("as_designed") or {}
    phase = optics.get("phase_error") or {}
    whole = (optics.get("analysis") or {}).get("grooves_whole_window")
    rows = []
    for i, freq in enumerate(optics.get("frequencies_ghz") or []):
        rows.append({
            "freq_ghz": freq, "eps_r": _at(optics.get("eps_r"), i), "tan_delta": _at(optics.get("tan_delta"), i),
            "outside_rf_table": bool(_at(optics.get("outside_rf_table"), i)),
            "printed": {key: _at(optics.get(key), i) for key in _LOSS_KEYS} | _focus_at(optics.get("focus"), i),
            "designed": {key: _at(designed.get(key), i) for key in _LOSS_KEYS} | _focus_at(designed.get("focus"), i),
            "phase_rms_rad": _at(phase.get("rms_rad"), i), "phase_strehl": _at(phase.get("strehl"), i),
            "vortex": _vortex_at(optics.get("vortex"), i),
            "grooves_whole": None if not whole else {
                "power_reflection": _at(whole.get("power_reflection"), i),
                "power_transmission": _at(whole.get("power_transmission"), i),
                **{f"{key}_off_points": _at((whole.get("cell_model_minus_whole_points") or {}).get(key), i)
                   for key in ("power_reflection", "power_transmission")}},
        })
    return rows


_LOSS_KEYS = ("transmission_loss_db", "absorption_db", "reflection_db", "spillover_db", "power_transmission")


def middle(values):
    """Return the middle item of a list (the band centre of a sweep), or None."""
    return values[len(values) // 2] if values else None


# A requirement's finding carries a severity for sorting and for the API, but it is not a printability finding:
# its badge says what became of the target, so a printable part's report shows no "blocker" it does not count.
REQUIREMENT_BADGES = {"blocker": "target missed", "caution": "target not evaluated", "note": "target met"}


def finding_badge(finding: dict) -> str:
    """Return the word on a finding's badge: its severity, or for a requirement what became of the target."""
    severity = finding.get("severity", "note")
    return REQUIREMENT_BADGES.get(severity, severity) if finding.get("rule") == "requirement" else severity


def severity_counts(findings: list[dict]) -> dict[str, int]:
    """Return how many printability findings of each severity, every severity present as a key.

    Requirement findings are left out: the counts stand beside the verdict, which they do not enter.
    """
    counts = dict.fromkeys(SEVERITY_ORDER, 0)
    for f in findings or []:
        if f.get("rule") == "requirement":
            continue
        counts[f.get("severity", "note")] = counts.get(f.get("severity", "note"), 0) + 1
    return counts


def headline(report: dict) -> dict:
    """Return the few numbers a comparison puts side by side: verdict, counts, cost, time, loss, focus."""
    estimate = report.get("estimate") or {}
    cost = estimate.get("cost") or {}
    row = middle(optics_rows(report.get("optics")))
    printed = (row or {}).get("printed", {})
    return {
        "verdict": report.get("verdict"), "counts": severity_counts(report.get("findings")),
        "meets_requirements": report.get("meets_requirements", "not_stated"),
        "cost_one": cost.get("total"), "currency": cost.get("currency"),
        "quantities": {q["quantity"]: q for q in estimate.get("quantities") or []},
        "print_time_s": estimate.get("print_time_s"), "calibrated": bool(estimate.get("calibrated")),
        "material_g": estimate.get("material_g"), "freq_ghz": (row or {}).get("freq_ghz"),
        "loss_db": printed.get("transmission_loss_db"), "strehl": printed.get("strehl"),
        "phase_strehl": (row or {}).get("phase_strehl"),
        "printer": (report.get("printer") or {}).get("name"), "material": (report.get("material") or {}).get("name"),
    }


def location_text(finding: dict) -> str:
    """Return where a finding is, as '(x, y, z) mm, layers a-b', or '' when it has no place."""
    parts = []
    if finding.get("location_mm"):
        parts.append("(" + ", ".join(f"{float(v):.2f}" for v in finding["location_mm"]) + ") mm")
    if finding.get("layers"):
        first, last = finding["layers"]
        parts.append(f"layer {first}" if first == last else f"layers {first}-{last}")
    return ", ".join(parts)


COUNT_UNITS = {"bodies": "body", "faces": "face", "edges": "edge", "holes": "hole", "pillars": "pillar",
               "islands": "island", "cavities": "cavity", "layers": "layer"}


def measured_text(finding: dict) -> str:
    """Return 'measured unit against a limit of limit unit' for a finding, or '' when it measured nothing.

    Counts read as whole numbers with their noun ("2 bodies", "1 edge"); a ratio carries what it is a ratio of.
    """
    measured, limit, unit = finding.get("measured"), finding.get("limit"), finding.get("unit") or ""
    if measured is None:
        return ""
    if unit in COUNT_UNITS:
        def count(n):
            return f"{int(round(n)):,} {COUNT_UNITS[unit] if int(round(n)) == 1 else unit}"
        return count(measured) + (f" against a limit of {count(limit)}" if limit is not None else "")
    if unit == "ratio":
        text = f"{significant(measured)} (height over width)"
        return text + (f" against a limit of {significant(limit)}" if limit is not None else "")
    suffix = f" {unit}" if unit else ""
    figures = _telling_figures(measured, limit)
    text = f"{significant(measured, figures)}{suffix}"
    return text + (f" against a limit of {significant(limit, figures)}{suffix}" if limit is not None else "")


def _telling_figures(measured: float, limit: float | None, least: int = 3, most: int = 6) -> int:
    """Return the significant figures that tell a value from its limit (3, up to 6): a target missed by 0.0005x
    does not read "1.3 x against a limit of 1.3 x"."""
    figures = least
    while limit is not None and figures < most and measured != limit and significant(measured, figures) == \
            significant(limit, figures):
        figures += 1
    return figures


def meets_label(value: str | None) -> str:
    """Return the words for ``meets_requirements``."""
    return MEETS_LABELS.get(value or "not_stated", value or "")


def requirement_rows(report: dict) -> list[dict]:
    """Return one row per stated target: wanted, as designed, as printed, worst over the tolerance band, status."""
    section = report.get("requirements") or {}
    rows = []
    for o in section.get("outcomes") or []:
        unit = o.get("unit") or ""
        rows.append({"label": o.get("label"), "wanted": o.get("wanted"),
                     "freq_ghz": o.get("freq_ghz"), "as_designed": value_text(o.get("as_designed"), unit),
                     "as_printed": value_text(o.get("as_printed"), unit),
                     "tolerance_worst": value_text(o.get("tolerance_worst"), unit),
                     "status": o.get("status"), "status_label": STATUS_LABELS.get(o.get("status"), o.get("status"))})
    return rows



FINDINGS_CSV_FIELDS = ("finding", "rule", "severity", "instance", "of", "x_mm", "y_mm", "z_mm", "first_layer",
                       "last_layer", "measured", "limit", "unit", "message")


def findings_csv(report: dict) -> str:
    """Return every finding and each listed instance as CSV rows (a finding without instances is one row)."""
    import csv
    import io

    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(FINDINGS_CSV_FIELDS)
    for number, f in enumerate(report.get("findings") or [], start=1):
        rows = f.get("instances") or [{"location_mm": f.get("location_mm"), "layers": f.get("layers"),
                                       "measured": f.get("measured")}]
        for k, inst in enumerate(rows, start=1):
            x, y, z = inst.get("location_mm") or (None, None, None)
            first, last = inst.get("layers") or (None, None)
            writer.writerow([number, f.get("rule"), f.get("severity"), k, f.get("count", 1), x, y, z, first, last,
                             inst.get("measured"), f.get("limit"), f.get("unit"), f.get("message")])
    return out.getvalue()
