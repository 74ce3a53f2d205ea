from django import template

from services.estimate.time_models import format_duration

register = template.Library()

VERDICT_LABELS = {"printable": "Printable", "printable_with_cautions": "Printable with cautions",
                  "not_printable": "Not printable"}


@register.filter
def verdict_label(value: str) -> str:
    return VERDICT_LABELS.get(value, value or "")


@register.filter
def meets_label(value: str) -> str:
    from services.render.tables import meets_label as label

    return label(value)


@register.filter
def duration(seconds) -> str:
    """Return seconds as '3 h 05 min' or '12 min'."""
    try:
        return format_duration(float(seconds))
    except (TypeError, ValueError):
        return ""


@register.filter
def mm3(value) -> str:
    try:
        return f"{float(value):,.1f}"
    except (TypeError, ValueError):
        return ""


@register.filter
def num(value, digits=2) -> str:
    try:
        return f"{float(value):,.{int(digits)}f}"
    except (TypeError, ValueError):
        return "" if value is None else str(value)


@register.filter
def coords(values) -> str:
    if not values:
        return ""
    return "(" + ", ".join(f"{float(v):.2f}" for v in values) + ")"


@register.filter
def zip_lists(a, b):
    return list(zip(a or [], b or []))


@register.filter
def badge(finding) -> str:
    """Return the word on a finding's badge (``render.tables.finding_badge``)."""
    from services.render.tables import finding_badge

    return finding_badge(finding)


@register.filter
def rule_label(value: str) -> str:
    from services.render.tables import rule_label as label

    return label(value or "")


@register.filter
def quote_label(value: str) -> str:
    from services.render.tables import quote_label as label

    return label(value or "")


@register.filter
def measured(finding: dict) -> str:
    """Return what a finding measured, with its unit and limit, in words."""
    from services.render.tables import measured_text

    return measured_text(finding)


@register.filter
def where(finding: dict) -> str:
    from services.render.tables import location_text

    return location_text(finding or {})


@register.filter
def signed(value, digits=2) -> str:
    """Return a delta with its sign ('+1.20', '-0.30', '0.00'); empty for None."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    return f"{v:+,.{int(digits)}f}" if round(v, int(digits)) else f"{0:.{int(digits)}f}"


@register.filter
def signed_duration(seconds) -> str:
    """Return a time delta as '+12 min' or '-1 h 05 min'."""
    try:
        v = float(seconds)
    except (TypeError, ValueError):
        return ""
    return ("-" if v < 0 else "+") + duration(abs(v))


@register.filter
def get(mapping, key):
    try:
        return mapping.get(key)
    except AttributeError:
        return None


@register.filter
def percent(value, digits=0) -> str:
    try:
        return f"{float(value) * 100:.{int(digits)}f} %"
    except (TypeError, ValueError):
        return ""


@register.filter
def label_of_stage(value: str) -> str:
    from webapp.checks.presenters import STAGES

    return dict(STAGES).get(value, value.replace("_", " ") if value else "")
