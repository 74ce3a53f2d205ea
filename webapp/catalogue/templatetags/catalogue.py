from django import template

from webapp.catalogue.schema import label_of

register = template.Library()


@register.filter
def share_percent(value, digits=1) -> str:
    """Return a share as '3.4 %'; empty for None."""
    try:
        return f"{float(value) * 100:.{int(digits)}f} %"
    except (TypeError, ValueError):
        return ""


@register.filter
def path_label(path: str) -> str:
    return label_of(path)


@register.filter
def rule_title(rule: str) -> str:
    """Return a rule family's name in words ("min_gap" -> "Minimum gap")."""
    from webapp.catalogue.schema import RULES

    return RULES[rule][0] if rule in RULES else str(rule).replace("_", " ").capitalize()


@register.filter
def limit_label(path: str) -> str:
    """Return one limit's label within its rule's row ("rules.min_gap.xy_mm" -> "in XY, mm")."""
    label = label_of(path)
    return label.split(" – ", 1)[1] if " – " in label else label.rsplit(".", 1)[-1].replace("_", " ")


@register.filter
def value_text(value) -> str:
    """Return a stored value as a person reads it: lists joined, None as a dash."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(value_text(v) for v in value)
    return str(value)


# Names the trade writes otherwise than their keys read with spaces ("lcd masked").
SPELLED = {"lcd_masked": "LCD-masked", "projector_masked": "projector-masked", "laser_scanned": "laser-scanned"}


@register.filter
def words(value: str) -> str:
    """Return a catalogue key (a process, a technology) as words: 'vat photopolymerisation', 'LCD-masked'."""
    return SPELLED.get(str(value or ""), str(value or "").replace("_", " "))
