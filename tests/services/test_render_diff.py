"""What changed between two reports: findings fixed, new and kept, and the deltas."""

from services.render.diff import diff_reports, finding_key


def _report(findings, total=28.57, time_s=884.0, loss=2.8, currency="EUR"):
    return {"verdict": "not_printable" if any(f["severity"] == "blocker" for f in findings) else "printable",
            "findings": findings, "estimate": {"print_time_s": time_s, "material_g": 9.4,
                                                "cost": {"currency": currency, "total": total}},
            "optics": {"frequencies_ghz": [140.0], "transmission_loss_db": [loss]}}


FEATURE = {"rule": "min_feature", "severity": "blocker", "measured": 0.1, "picture": "min_feature_free.png"}
SLENDER = {"rule": "aspect_ratio", "severity": "blocker", "measured": 20.0, "picture": "aspect_ratio_blocker.png"}
GAP = {"rule": "min_gap", "severity": "caution", "measured": 0.2, "picture": "min_gap_xy.png"}


def test_it_sorts_findings_into_fixed_new_and_kept():
    """A widened fin fixes the slenderness blocker, keeps a thinner-than-limit feature and opens a gap."""
    old = _report([FEATURE, SLENDER])
    new = _report([{**FEATURE, "measured": 0.3}, GAP], total=29.07, time_s=900.0, loss=2.85)
    diff = diff_reports(old, new)
    assert [f["rule"] for f in diff.fixed] == ["aspect_ratio"]
    assert [f["rule"] for f in diff.new] == ["min_gap"]
    assert [(a["measured"], b["measured"]) for a, b in diff.kept] == [(0.1, 0.3)]
    assert diff.cost_delta == 0.5 and diff.print_time_delta_s == 16.0 and abs(diff.loss_delta_db - 0.05) < 1e-9
    assert diff.verdict_old == "not_printable" and diff.to_dict()["kept"][0][1]["measured"] == 0.3


def test_two_findings_of_one_kind_pair_one_to_one():
    """Two instances before and one after: one kept, one fixed."""
    diff = diff_reports(_report([FEATURE, FEATURE]), _report([FEATURE]))
    assert len(diff.kept) == 1 and len(diff.fixed) == 1 and not diff.new


def test_it_does_not_subtract_different_currencies_or_frequencies():
    """A cost in another currency, or a loss at another frequency, has no delta."""
    old, new = _report([]), _report([], currency="GBP")
    new["optics"]["frequencies_ghz"] = [150.0]
    diff = diff_reports(old, new)
    assert diff.cost_delta is None and diff.loss_delta_db is None and diff.print_time_delta_s == 0.0


def test_the_picture_tells_kinds_apart_within_a_rule():
    """Free-standing and supported thin features are different problems of one rule."""
    assert finding_key(FEATURE) != finding_key({**FEATURE, "picture": "min_feature_supported.png"})
    assert finding_key({"rule": "units", "severity": "note"}) == ("units", "note")
