"""Tables drawn from a stored report dict, shared by the web page, the PDF and the comparisons.

A report stores its optics per frequency as parallel lists (JSON-friendly); people read rows.
Everything here takes the dict of ``Report.to_dict()`` and returns plain rows, never raising on an
older or partial report (a missing value is None and shows as a dash).
"""

from __future__ import annotations

SEVERITY_ORDER = ("blocker", "caution", "note")

VERDICT_LABELS = {"printable": "Printable", "printable_with_cautions": "Printable with cautions",
                  "not_printable": "Not printable"}

RULE_LABELS = {
    "mesh_health": "Mesh health", "units": "Units", "build_fit": "Build volume", "min_feature": "Minimum feature",
    "min_gap": "Minimum gap", "min_hole": "Minimum hole", "aspect_ratio": "Slenderness", "overhang": "Overhang",
    "island": "Island", "trapped_volume": "Trapped resin", "period": "Lattice period", "phase_error": "Phase error",
    "rf_table": "RF data range",
}

QUOTE_LABELS = {
    "material": "Material", "machine_time": "Machine time", "setup_labour": "Set-up labour",
    "post_processing_build": "Post-processing per build", "post_processing_part": "Post-processing per part",
    "consumables": "Consumables", "failure_allowance": "Failure allowance", "margin": "Margin",
}


def rule_label(rule: str) -> str:
    """Return the display name of a rule."""
    return RULE_LABELS.get(rule, rule.replace("_", " ").capitalize())


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


def optics_rows(optics: dict | None) -> list[dict]:
    """Return one row per design frequency: material data, then as-designed and as-printed values."""
    if not optics:
        return []
    designed = optics.get("as_designed") or {}
    phase = optics.get("phase_error") or {}
    rows = []
    for i, freq in enumerate(optics.get("frequencies_ghz") or []):
        rows.append({
            "freq_ghz": freq, "eps_r": _at(optics.get("eps_r"), i), "tan_delta": _at(optics.get("tan_delta"), i),
            "outside_rf_table": bool(_at(optics.get("outside_rf_table"), i)),
            "printed": {key: _at(optics.get(key), i) for key in _LOSS_KEYS} | _focus_at(optics.get("focus"), i),
            "designed": {key: _at(designed.get(key), i) for key in _LOSS_KEYS} | _focus_at(designed.get("focus"), i),
            "phase_rms_rad": _at(phase.get("rms_rad"), i), "phase_strehl": _at(phase.get("strehl"), i),
        })
    return rows


_LOSS_KEYS = ("transmission_loss_db", "absorption_db", "reflection_db", "spillover_db", "power_transmission")


def middle(values):
    """Return the middle item of a list (the band centre of a sweep), or None."""
    return values[len(values) // 2] if values else None


def severity_counts(findings: list[dict]) -> dict[str, int]:
    """Return how many findings of each severity, every severity present as a key."""
    counts = dict.fromkeys(SEVERITY_ORDER, 0)
    for f in findings or []:
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


def measured_text(finding: dict) -> str:
    """Return 'measured / limit unit' for a finding, or '' when it measured nothing."""
    if finding.get("measured") is None:
        return ""
    unit = finding.get("unit") or ""
    unit = "" if unit == "ratio" else f" {unit}"
    text = f"{finding['measured']:.3g}"
    if finding.get("limit") is not None:
        text += f" against a limit of {finding['limit']:.3g}"
    return text + unit
