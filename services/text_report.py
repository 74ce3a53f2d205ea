"""A report as a few lines of plain text, for terminals and logs."""

from __future__ import annotations

from services.estimate.time_models import format_duration


def report_text(r: dict) -> str:
    """Return a short human summary of a report dict."""
    d, lay = r["design"], r["layers"]
    lines = [
        f"{r.get('path', d['name'])}: {r['verdict'].replace('_', ' ').upper()}",
        f"  {r['printer']['name']} / {r['material']['name']}; {d['triangles']:,} triangles, "
        f"{d['bbox_mm'][0]:.1f} x {d['bbox_mm'][1]:.1f} x {d['bbox_mm'][2]:.1f} mm, {lay['count']} layers",
    ]
    for f in r["findings"]:
        where = f" at ({', '.join(f'{v:.2f}' for v in f['location_mm'])}) mm" if f.get("location_mm") else ""
        count = f" x{f['count']}" if f.get("count", 1) > 1 else ""
        lines.append(f"  [{f['severity']}] {f['rule']}{count}: {f['message']}{where}")
    est = r.get("estimate")
    if est:
        lines.append(f"  estimate: {est['material_ml']:.1f} ml, {format_duration(est['print_time_s'])}, "
                     f"{est['cost']['total']:.2f} {est['cost']['currency']} for one")
    opt = r.get("optics")
    if opt and opt.get("frequencies_ghz"):
        loss = ", ".join(f"{f:g} GHz {l:.2f} dB" for f, l in zip(opt["frequencies_ghz"], opt["transmission_loss_db"]))
        lines.append(f"  transmission loss: {loss}")
    return "\n".join(lines)
