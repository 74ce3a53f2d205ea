"""Findings and the verdict they add up to."""

import pytest

from services.findings import Finding, sorted_by_severity, verdict_of


def test_any_blocker_makes_it_not_printable():
    """A blocker wins over cautions and notes."""
    fs = [Finding("units", "caution", "x"), Finding("min_gap", "blocker", "y"), Finding("mesh_health", "note", "z")]
    assert verdict_of(fs) == "not_printable"


def test_cautions_without_blockers_make_it_printable_with_cautions():
    """Cautions alone give printable_with_cautions; notes alone give printable."""
    assert verdict_of([Finding("overhang", "caution", "x")]) == "printable_with_cautions"
    assert verdict_of([Finding("mesh_health", "note", "x")]) == "printable"
    assert verdict_of([]) == "printable"


def test_it_sorts_blockers_first():
    """Blockers come first, then cautions, then notes."""
    fs = [Finding("units", "note", "a"), Finding("island", "blocker", "b"), Finding("overhang", "caution", "c")]
    assert [f.severity for f in sorted_by_severity(fs)] == ["blocker", "caution", "note"]


def test_it_refuses_an_unknown_rule_or_severity():
    """A typo in a rule name or severity fails loudly instead of producing an unknown finding."""
    with pytest.raises(ValueError):
        Finding("min_feat", "blocker", "x")
    with pytest.raises(ValueError):
        Finding("min_feature", "fatal", "x")
