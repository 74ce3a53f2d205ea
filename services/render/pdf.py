"""The report as a PDF a designer can attach to a purchase request, from the report dict and its figures.

    report_pdf(report, figures, checked_at=..., link=...) -> bytes

No Django: the site, the API and the command line all call this with a stored report dict
(``Report.to_dict()``) and the figure bytes by name. fpdf2 draws it; DejaVu Sans (shipped
inside matplotlib, already a dependency) gives the Greek letters and symbols the core PDF
fonts lack.
"""

from __future__ import annotations

import importlib.util
import io
import logging
from collections.abc import Mapping
from datetime import datetime
from pathlib import Path

from fpdf import FPDF
from fpdf.enums import XPos, YPos
from PIL import Image

from services.numbers_text import significant
from services.render.tables import (VERDICT_LABELS, finding_badge, location_text, meets_label, measured_text,
                                    optics_rows, quote_label, requirement_rows, rule_label, severity_counts)

INK, MUTED, LINE = (27, 34, 48), (93, 100, 114), (205, 202, 192)
VERDICT_RGB = {"printable": (15, 92, 97), "printable_with_cautions": (122, 79, 0), "not_printable": (74, 33, 82)}
SEVERITY_RGB = {"blocker": (74, 33, 82), "caution": (122, 79, 0), "note": (79, 90, 116)}  # as on the site
FONT = "DejaVu"

# fpdf2 subsets the embedded font with fontTools, which logs every table it prunes at INFO: a
# site logging at INFO would print dozens of lines per download.
logging.getLogger("fontTools").setLevel(logging.WARNING)


def _font_dir() -> Path:
    spec = importlib.util.find_spec("matplotlib")
    return Path(next(iter(spec.submodule_search_locations))) / "mpl-data" / "fonts" / "ttf"


class _Document(FPDF):
    """A4 portrait with a running header line and page numbers."""

    def __init__(self, title: str) -> None:
        super().__init__(orientation="P", unit="mm", format="A4")
        self.title_text = title
        self.set_margins(16, 16, 16)
        self.set_auto_page_break(True, margin=16)
        self.add_font(FONT, "", str(_font_dir() / "DejaVuSans.ttf"))
        self.add_font(FONT, "B", str(_font_dir() / "DejaVuSans-Bold.ttf"))
        self.set_title(title)
        self.set_creator("Phasewright")

    def header(self) -> None:
        if self.page_no() > 1:
            self.set_font(FONT, "", 8)
            self.set_text_color(*MUTED)
            self.cell(0, 5, self.title_text, new_x=XPos.LMARGIN, new_y=YPos.NEXT)
            self.ln(2)

    def footer(self) -> None:
        self.set_y(-12)
        self.set_font(FONT, "", 8)
        self.set_text_color(*MUTED)
        self.cell(0, 5, f"Phasewright check report · page {self.page_no()} of {{nb}}", align="C")


def report_pdf(report: dict, figures: Mapping[str, bytes], *, checked_at: datetime, link: str | None = None) -> bytes:
    """Return the PDF of a report: verdict, quote, findings with pictures, views, optics, versions, cautions."""
    design = report.get("design") or {}
    doc = _Document(f"{design.get('name', 'design')} on {(report.get('printer') or {}).get('name', '?')}")
    doc.add_page()
    _title(doc, report, checked_at, link)
    _verdict(doc, report)
    _quote(doc, report.get("estimate"))
    _findings(doc, report.get("findings") or [], figures)
    _what_to_change(doc, report.get("what_to_change") or [], report.get("changes_unfinished") or [])
    _target_changes(doc, report.get("target_changes") or [])
    _views(doc, figures)
    _optics(doc, report.get("optics"), figures)
    _design(doc, report)
    _versions(doc, report)
    _cautions(doc, report.get("cautions") or [])
    return bytes(doc.output())


def _heading(doc: _Document, text: str, room_mm: float = 30) -> None:
    """Start a section, on a new page when less than ``room_mm`` is left."""
    if doc.get_y() > doc.h - doc.b_margin - room_mm:
        doc.add_page()
    doc.ln(3)
    doc.set_font(FONT, "B", 12)
    doc.set_text_color(*INK)
    doc.cell(0, 7, text, new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    doc.set_draw_color(*LINE)
    doc.line(doc.l_margin, doc.get_y(), doc.w - doc.r_margin, doc.get_y())
    doc.ln(2)


def _text(doc: _Document, text: str, size: float = 9.5, *, bold: bool = False, colour=INK, height: float = 4.8) -> None:
    doc.set_font(FONT, "B" if bold else "", size)
    doc.set_text_color(*colour)
    doc.multi_cell(0, height, text, align="L", new_x=XPos.LMARGIN, new_y=YPos.NEXT)


def _title(doc: _Document, report: dict, checked_at: datetime, link: str | None) -> None:
    printer, material = report.get("printer") or {}, report.get("material") or {}
    _text(doc, "Phasewright check report", 9, colour=MUTED)
    _text(doc, (report.get("design") or {}).get("name", "design"), 18, bold=True, height=9)
    _text(doc, f"Printer profile {printer.get('name')} (v{printer.get('version')}) · material "
               f"{material.get('name')} (v{material.get('version')})", 10)
    _text(doc, f"Checked {checked_at:%Y-%m-%d %H:%M} UTC" + (f" · {link}" if link else ""), 8.5, colour=MUTED)
    doc.ln(3)


def _verdict(doc: _Document, report: dict) -> None:
    verdict = report.get("verdict", "")
    counts = severity_counts(report.get("findings"))
    doc.set_fill_color(*VERDICT_RGB.get(verdict, MUTED))
    doc.set_text_color(255, 255, 255)
    doc.set_font(FONT, "B", 14)
    summary = ", ".join(f"{n} {sev}{'s' if n != 1 else ''}" for sev, n in counts.items() if n) or "no findings"
    doc.cell(0, 12, f"  {VERDICT_LABELS.get(verdict, verdict)}  ·  {summary}", fill=True,
             new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    doc.ln(2)
    _requirements(doc, report)


def _requirements(doc: _Document, report: dict) -> None:
    """Say beside the verdict whether the part meets its stated targets, and how each fared."""
    meets = report.get("meets_requirements", "not_stated")
    _text(doc, f"Requirements: {meets_label(meets)}", 11, bold=True, colour=INK)
    rows = requirement_rows(report)
    if not rows:
        doc.ln(1)
        return
    source = (report.get("requirements") or {}).get("source")
    _text(doc, f"Targets: {source}. Checked as designed, as printed and over the printer's tolerance band; they do "
               "not enter the verdict.", 8.5, colour=MUTED)
    table = [["Target", "Wanted", "As designed", "As printed", "Worst in tolerance", "Result"]]
    table += [[r["label"] + (f" at {r['freq_ghz']:g} GHz" if r["freq_ghz"] else ""), r["wanted"], r["as_designed"],
               r["as_printed"], r["tolerance_worst"], r["status_label"]] for r in rows]
    _table(doc, table, (56, 30, 22, 22, 24, 24))
    doc.ln(2)


def _table(doc: _Document, rows: list[list[str]], widths: tuple[float, ...], *, header: bool = True,
           align: str = "LEFT", size: float = 8.5) -> None:
    """Draw a simple ruled table; the first row is the header when ``header``."""
    doc.set_font(FONT, "", size)
    doc.set_text_color(*INK)
    doc.set_draw_color(*LINE)
    doc.set_fill_color(255, 255, 255)  # tables fill with the current colour: never the verdict's
    with doc.table(col_widths=widths, width=sum(widths), align="LEFT", text_align=align, first_row_as_headings=header,
                   line_height=5, borders_layout="HORIZONTAL_LINES", headings_style=_headings_style()) as table:
        for values in rows:
            row = table.row()
            for value in values:
                row.cell(value)
    doc.ln(2)


def _headings_style():
    from fpdf.fonts import FontFace

    return FontFace(family=FONT, emphasis="BOLD", color=INK, fill_color=(240, 238, 232))


def _money(value, currency: str = "") -> str:
    return "-" if value is None else f"{float(value):,.2f}{(' ' + currency) if currency else ''}"


def _minutes(seconds) -> str:
    if seconds is None:
        return "-"
    minutes = round(float(seconds) / 60)
    return f"{minutes // 60} h {minutes % 60:02d} min" if minutes >= 60 else f"{minutes} min"


def _waste(estimate: dict) -> str:
    """Return ' (0.11 ml of it waste, the material's 10 %)', or nothing for a material with no waste or a report
    stored before the field."""
    if not estimate.get("waste_ml"):
        return ""
    return f" ({estimate['waste_ml']:.2f} ml of it waste, the material's {estimate.get('waste_percent', 0):g} %)"


def _quote(doc: _Document, estimate: dict | None) -> None:
    _heading(doc, "Quote and print time", room_mm=70)
    if not estimate:
        _text(doc, "No estimate: the check stopped before the estimate (see the findings).")
        return
    cost = estimate.get("cost") or {}
    currency = cost.get("currency", "")
    calibrated = "calibrated from logged prints" if estimate.get("calibrated") else "not yet calibrated"
    _text(doc, f"Print time for one part: {_minutes(estimate.get('print_time_s'))} ({calibrated}); material "
               f"{estimate.get('material_ml', 0):.2f} ml{_waste(estimate)}, {estimate.get('material_g', 0):.1f} g; "
               f"{_parts(estimate.get('parts_per_build'))} fit on one build.")
    doc.ln(1)
    lines = [["Item", "Detail", f"Amount ({currency})"]]
    lines += [[quote_label(x["item"]), x.get("detail", ""), _money(x["amount"])] for x in cost.get("lines") or []]
    lines.append(["Total for one part", "", _money(cost.get("total"))])
    _table(doc, lines, (55, 85, 38))
    quantities = [["Quantity", "Builds", f"Per part ({currency})", f"Total ({currency})", "Machine time"]]
    quantities += [[str(q["quantity"]), str(q["builds"]), _money(q["per_part"]), _money(q["total"]),
                    _minutes(q.get("print_time_s"))] for q in estimate.get("quantities") or []]
    if len(quantities) > 1:
        _table(doc, quantities, (28, 24, 42, 42, 42))


def _png_size_mm(png: bytes, width_mm: float) -> float:
    with Image.open(io.BytesIO(png)) as img:
        return width_mm * img.height / img.width


def _findings(doc: _Document, findings: list[dict], figures: Mapping[str, bytes]) -> None:
    _heading(doc, f"Findings ({len(findings)})", room_mm=60)
    if not findings:
        _text(doc, "No findings: the printer's grid reproduces the part within every rule of the profile.")
    for number, finding in enumerate(findings, start=1):
        picture = figures.get(finding.get("picture") or "")
        height = _png_size_mm(picture, 52) if picture else 0
        if doc.get_y() + max(height, 22) > doc.h - doc.b_margin:
            doc.add_page()
        _finding(doc, number, finding, picture, height)


def _what_to_change(doc: _Document, alternatives: list[dict], unfinished: list[str]) -> None:
    """List the changes that were tried and remove blockers, with the numbers they gave, and those the search's
    time left unfinished."""
    lines = []
    for a in alternatives:
        removed = ", ".join(rule_label(r) for r in a.get("blockers_removed", [])) or "none"
        cost = f"{a['cost_one']:.2f} {a.get('currency') or ''}".strip() if a.get("cost_one") is not None else "-"
        lines.append((a, f"{a['blockers']} blocker{'' if a['blockers'] == 1 else 's'}, {a['cautions']} caution"
                         f"{'' if a['cautions'] == 1 else 's'}; removes {removed}; one part {cost}"))
    _tried_changes(doc, "What would remove the blockers", "Each change was tried: the part's layers at that printer's "
                   "grid (sliced again, or read from layers already made where they are the same, turned) and every "
                   "design rule run on them (the optics were not re-run).", lines)
    if unfinished:
        if not lines:  # as on the page: the section stands, saying that nothing finished removes a blocker
            _heading(doc, "What would remove the blockers", room_mm=40)
            _text(doc, "None of the changes finished within the search's time removes a blocker.")
        _text(doc, "Not finished within the search's time, so not judged: " + "; ".join(unfinished)
              + ". Check the part again with that change made to know.", 8.5, colour=MUTED)


def _target_changes(doc: _Document, changes: list[dict]) -> None:
    """List the catalogue changes that were tried and meet missed targets, with the values they gave."""
    lines = []
    for c in changes:
        values = "; ".join(f"{r['label']} {r['value_text']} (wanted {r['wanted']}): {STATUS_WORDS[r['status']]}"
                           for r in c.get("results", []))
        lines.append((c, f"{values}; {c['missed']} target{'' if c['missed'] == 1 else 's'} still not met"))
    _tried_changes(doc, "What would meet the missed targets", "Each change was tried: the part regenerated with the new "
                   "design, or printed with that printer and material; the optics run again, and every stated target "
                   "judged again.", lines)


def _tried_changes(doc: _Document, title: str, how: str, lines: list[tuple[dict, str]]) -> None:
    """Draw a heading, how the changes were tried, and one line per change: its sentence, what it gave, its note."""
    if not lines:
        return
    _heading(doc, title, room_mm=40)
    _text(doc, how, 8.5, colour=MUTED)
    for change, gave in lines:
        _text(doc, f"- {change['change'][:1].upper()}{change['change'][1:]}: {gave}"
                   + (f" ({change['note']})" if change.get("note") else "") + ".")


STATUS_WORDS = {"met": "met", "missed": "still missed", "lost_in_printing": "still lost in printing",
                "not_evaluated": "not evaluated"}
PDF_INSTANCES = 10  # the worst instances listed under a grouped finding


def _finding(doc: _Document, number: int, finding: dict, picture: bytes | None, picture_h: float) -> None:
    """Draw one finding: badge, rule, what to change, where; its picture on the right."""
    top = doc.get_y()
    text_w = doc.epw - (58 if picture else 0)
    severity = finding.get("severity", "note")
    doc.set_fill_color(*SEVERITY_RGB.get(severity, MUTED))
    doc.set_text_color(255, 255, 255)
    doc.set_font(FONT, "B", 8.5)
    badge = f"{number}  {finding_badge(finding).upper()}"
    badge_w = max(24.0, doc.get_string_width(badge) + 4)
    doc.cell(badge_w, 5.5, badge, fill=True, align="C")
    doc.set_text_color(*INK)
    doc.set_font(FONT, "B", 10)
    doc.cell(text_w - badge_w, 5.5, f"  {rule_label(finding.get('rule', ''))}"
             + (f" · {finding['count']} instances" if finding.get("count", 1) > 1 else ""),
             new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    doc.set_font(FONT, "", 9.5)
    doc.multi_cell(text_w, 4.8, finding.get("message", ""), align="L", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    details = "; ".join(t for t in (measured_text(finding), location_text(finding)) if t)
    if details:
        doc.set_font(FONT, "", 8.5)
        doc.set_text_color(*MUTED)
        doc.multi_cell(text_w, 4.4, details, align="L", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    worst = (finding.get("instances") or [])[:PDF_INSTANCES]
    if len(worst) > 1:
        unit = finding.get("unit") or ""
        unit = "" if unit == "ratio" else f" {unit}"
        lines = [f"{k}. ({', '.join(f'{v:.2f}' for v in i['location_mm'])}) mm, layers {i['layers'][0]}-"
                 f"{i['layers'][1]}: {significant(i['measured'])}{unit}" for k, i in enumerate(worst, start=1)]
        doc.set_font(FONT, "", 8)
        doc.set_text_color(*MUTED)
        doc.multi_cell(text_w, 4.0, f"The worst {len(worst)} of {finding.get('count', len(worst))}: " + "; ".join(lines)
                       + " (all of them in the findings CSV).", align="L", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    if picture:
        doc.image(io.BytesIO(picture), x=doc.w - doc.r_margin - 52, y=top, w=52)
    doc.set_y(max(doc.get_y(), top + picture_h) + 4)


def _figure(doc: _Document, png: bytes, width_mm: float, caption: str) -> None:
    height = _png_size_mm(png, width_mm)
    if doc.get_y() + height + 8 > doc.h - doc.b_margin:
        doc.add_page()
    doc.image(io.BytesIO(png), x=doc.l_margin, w=width_mm)
    _text(doc, caption, 8, colour=MUTED)
    doc.ln(2)


def _views(doc: _Document, figures: Mapping[str, bytes]) -> None:
    views = [(name, caption) for name, caption in (
        ("perspective.png", "The part as built, in perspective; numbers mark the findings above."),
        ("thickness_map.png", "As-printed thickness seen from above; numbers mark the findings above."),
    ) if name in figures]
    if views:
        _heading(doc, "Views of the part", room_mm=100)
        for name, caption in views:
            _figure(doc, figures[name], 105, caption)


def _optics(doc: _Document, optics: dict | None, figures: Mapping[str, bytes]) -> None:
    rows = optics_rows(optics)
    if not rows:
        return
    _heading(doc, "Optics at the design frequencies", room_mm=60)
    _text(doc, "Each value as designed / as printed on this printer's pixel and layer grid. Distances from "
               + str(optics.get("distances_from", "the part's far extreme")) + ".", 8.5, colour=MUTED)
    table = [["GHz", "εr", "tan δ", "Loss (dB)", "Strehl", "Focus (mm)", "Phase RMS (rad)"]]
    for r in rows:
        d, p = r["designed"], r["printed"]
        table.append([f"{r['freq_ghz']:g}", _num(r["eps_r"], 3), _num(r["tan_delta"], 4),
                      _pair(d.get("transmission_loss_db"), p.get("transmission_loss_db"), 2),
                      _pair(d.get("strehl"), p.get("strehl"), 3), _pair(d.get("wavefront_focus_mm"), p.get("wavefront_focus_mm"), 1),
                      _num(r["phase_rms_rad"], 3)])
    _table(doc, table, (16, 16, 18, 32, 30, 36, 30))
    if rows[0].get("grooves_whole"):
        _text(doc, "Matching grooves solved whole: the designed window, unbounded, as one rigorous lamellar stack (the "
                   "table above reads the part cell by cell, with its pixel and layer steps and any ring at the rim); "
                   "the cells' difference in percentage points.", 8.5, colour=MUTED)
        whole = [["GHz", "Reflection", "Transmission", "Cells' difference R / T"]]
        for r in rows:
            g = r["grooves_whole"]
            whole.append([f"{r['freq_ghz']:g}", f"{100 * g['power_reflection']:.2f} %",
                          f"{100 * g['power_transmission']:.1f} %",
                          _pair(g["power_reflection_off_points"], g["power_transmission_off_points"], 2)])
        _table(doc, whole, (16, 40, 40, 60))
    # The loss against frequency (drawn for two frequencies or more), the focal plane, and the transmitted phase.
    for name, width_mm in (("optics_loss.png", 150), ("optics_focal_plane.png", 150), ("optics_phase_map.png", 100)):
        if name in figures:
            _figure(doc, figures[name], width_mm, "")


def _num(value, digits: int) -> str:
    return "-" if value is None else f"{float(value):.{digits}f}"


def _pair(designed, printed, digits: int) -> str:
    return f"{_num(designed, digits)} / {_num(printed, digits)}"


def _design(doc: _Document, report: dict) -> None:
    design, layers = report.get("design") or {}, report.get("layers") or {}
    bbox = design.get("bbox_mm") or [0, 0, 0]
    _heading(doc, "Design", room_mm=40)
    _table(doc, [
        ["File", f"{design.get('name')} ({design.get('format')}, {design.get('units')})"],
        ["Size", f"{bbox[0]:.2f} × {bbox[1]:.2f} × {bbox[2]:.2f} mm; {design.get('triangles', 0):,} triangles; "
                 f"{design.get('bodies')} bod{'y' if design.get('bodies') == 1 else 'ies'}"],
        ["Volume", f"{design.get('volume_mm3', 0):,.1f} mm³ as designed, {layers.get('volume_mm3', 0):,.1f} mm³ as printed"],
        ["Layer stack", f"{layers.get('count')} layers of {layers.get('layer_height_mm')} mm at "
                        f"{layers.get('pixel_mm')} mm pixels"],
        ["SHA-256", str(design.get("sha256", ""))[:32] + "…"],
    ], (35, 143), header=False)


def _versions(doc: _Document, report: dict) -> None:
    printer, material = report.get("printer") or {}, report.get("material") or {}
    _heading(doc, "Profile and material used", room_mm=40)
    rf = "; ".join(f"{p['freq_ghz']:g} GHz: εr {p['eps_r']:g}, tan δ {p['tan_delta']:g}" for p in material.get("rf") or [])
    _table(doc, [
        ["Printer profile", f"{printer.get('name')} ({printer.get('slug')}), version {printer.get('version')}"],
        ["Process", f"{str(printer.get('process', '')).replace('_', ' ')}, {printer.get('pixel_mm')} mm pixel, "
                    f"{printer.get('layer_height_mm')} mm layers"],
        ["Material", f"{material.get('name')} ({material.get('slug')}), version {material.get('version')}"],
        ["RF data", rf or "-"],
        ["Prices", str(printer.get("notes") or "") + " " + str(material.get("notes") or "")],
    ], (35, 143), header=False)


def _cautions(doc: _Document, cautions: list[str]) -> None:
    if not cautions:
        return
    _heading(doc, "Safety reminders", room_mm=40)
    for caution in cautions:
        _text(doc, "•  " + caution, 9)


def _parts(n) -> str:
    return "-" if n is None else f"{n} part{'' if n == 1 else 's'}"
