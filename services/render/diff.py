"""What changed between two reports: findings fixed, new findings, and the cost and time deltas.

Used to compare a design's revisions (same printer and material, new geometry) and, with the
same code, one design on two printers or materials. Works on stored report dicts.
"""

from __future__ import annotations

from dataclasses import dataclass

from services.render.tables import headline


@dataclass(frozen=True, slots=True)
class ReportDiff:
    """Findings matched between an older and a newer report, and the headline deltas (new minus old)."""

    fixed: tuple[dict, ...]
    new: tuple[dict, ...]
    kept: tuple[tuple[dict, dict], ...]
    verdict_old: str | None
    verdict_new: str | None
    cost_delta: float | None
    print_time_delta_s: float | None
    material_delta_g: float | None
    loss_delta_db: float | None
    currency: str | None

    def to_dict(self) -> dict:
        return {"fixed": list(self.fixed), "new": list(self.new), "kept": [list(pair) for pair in self.kept],
                "verdict_old": self.verdict_old, "verdict_new": self.verdict_new, "cost_delta": self.cost_delta,
                "print_time_delta_s": self.print_time_delta_s, "material_delta_g": self.material_delta_g,
                "loss_delta_db": self.loss_delta_db, "currency": self.currency}


def finding_key(finding: dict) -> tuple[str, str]:
    """Return what makes two findings 'the same problem': the rule and which of its pictures it draws.

    Rules name a picture per kind of problem (free-standing feature, supported feature, ...), so
    the picture name tells kinds apart within a rule; locations move between revisions and
    cannot be the key.
    """
    picture = finding.get("picture") or ""
    return finding.get("rule", ""), picture.rsplit(".", 1)[0] or finding.get("severity", "")


def _delta(new, old):
    return None if new is None or old is None else round(float(new) - float(old), 6)


def diff_reports(old: dict, new: dict) -> ReportDiff:
    """Return what changed from report ``old`` to report ``new``."""
    old_by_key: dict[tuple, list[dict]] = {}
    for f in old.get("findings") or []:
        old_by_key.setdefault(finding_key(f), []).append(f)
    kept, fresh = [], []
    for f in new.get("findings") or []:
        bucket = old_by_key.get(finding_key(f))
        if bucket:
            kept.append((bucket.pop(0), f))
        else:
            fresh.append(f)
    fixed = [f for bucket in old_by_key.values() for f in bucket]
    a, b = headline(old), headline(new)
    return ReportDiff(
        fixed=tuple(fixed), new=tuple(fresh), kept=tuple(kept), verdict_old=a["verdict"], verdict_new=b["verdict"],
        cost_delta=_delta(b["cost_one"], a["cost_one"]) if a["currency"] == b["currency"] else None,
        print_time_delta_s=_delta(b["print_time_s"], a["print_time_s"]),
        material_delta_g=_delta(b["material_g"], a["material_g"]),
        loss_delta_db=_delta(b["loss_db"], a["loss_db"]) if a["freq_ghz"] == b["freq_ghz"] else None,
        currency=b["currency"],
    )
