"""A report as a few lines of plain text, for terminals and logs."""

from __future__ import annotations

from services.estimate.time_models import format_duration
from services.numbers_text import significant
from services.render.tables import finding_badge


MEETS_WORDS = {"yes": "yes", "no": "NO", "not_evaluated": "not all evaluated", "not_stated": "none stated"}


def report_text(r: dict) -> str:
    """Return a short human summary of a report dict."""
    d, lay = r["design"], r["layers"]
    lines = [
        f"{r.get('path', d['name'])}: {r['verdict'].replace('_', ' ').upper()}"
        f"; meets requirements: {MEETS_WORDS[r.get('meets_requirements', 'not_stated')]}",
        f"  {r['printer']['name']} / {r['material']['name']}; {d['triangles']:,} triangles, "
        f"{d['bbox_mm'][0]:.1f} x {d['bbox_mm'][1]:.1f} x {d['bbox_mm'][2]:.1f} mm, {lay['count']} layers",
    ]
    for f in r["findings"]:
        where = f" at ({', '.join(f'{v:.2f}' for v in f['location_mm'])}) mm" if f.get("location_mm") else ""
        count = f" x{f['count']}" if f.get("count", 1) > 1 else ""
        lines.append(f"  [{finding_badge(f)}] {f['rule']}{count}: {f['message']}{where}")
    for a in r.get("what_to_change") or []:
        removed = ", ".join(a["blockers_removed"]) or "nothing"
        left = f"{a['blockers']} blocker{'' if a['blockers'] == 1 else 's'} left"
        lines.append(f"  would remove {removed}: {a['change']} ({left})")
    if r.get("changes_unfinished"):
        lines.append(f"  not finished within the search's time (not judged): {'; '.join(r['changes_unfinished'])}")
    for c in r.get("target_changes") or []:
        values = ", ".join(f"{t['label']} {t['value_text']} ({t['status'].replace('_', ' ')})" for t in c["results"])
        lines.append(f"  would meet targets: {c['change']}: {values}")
    est = r.get("estimate")
    if est:
        lines.append(f"  estimate: {est['material_ml']:.1f} ml, {format_duration(est['print_time_s'])}, "
                     f"{est['cost']['total']:.2f} {est['cost']['currency']} for one")
    opt = r.get("optics")
    if opt and opt.get("frequencies_ghz"):
        loss = ", ".join(f"{f:g} GHz " + ("not computed" if l is None else f"{l:.2f} dB")
                         for f, l in zip(opt["frequencies_ghz"], opt["transmission_loss_db"]))
        lines.append(f"  transmission loss: {loss}")
        zone = opt.get("clear_aperture")
        if zone:
            lines.append(f"  clear aperture ({zone['how']}): {significant(zone['area_mm2'], 4)} mm2")
        vortex = opt.get("vortex")
        if vortex:
            purity = ", ".join(f"{f:g} GHz {p:.3f}" for f, p in zip(opt["frequencies_ghz"],
                                                                   vortex["as_printed"]["mode_purity"]))
            lines.append(f"  spiral plate, charge {vortex['charge']}: mode purity as printed {purity}")
    return "\n".join(lines)
