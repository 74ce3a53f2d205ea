from django import template

register = template.Library()

VERDICT_LABELS = {"printable": "Printable", "printable_with_cautions": "Printable with cautions",
                  "not_printable": "Not printable"}


@register.filter
def verdict_label(value: str) -> str:
    return VERDICT_LABELS.get(value, value or "")


@register.filter
def duration(seconds) -> str:
    """Return seconds as '3 h 05 min' or '12 min'."""
    try:
        minutes = round(float(seconds) / 60)
    except (TypeError, ValueError):
        return ""
    return f"{minutes // 60} h {minutes % 60:02d} min" if minutes >= 60 else f"{minutes} min"


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
