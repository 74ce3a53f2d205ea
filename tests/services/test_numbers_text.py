"""Numbers in the reports' sentences: significant figures without exponent form.

Python's own ``g`` format is the reference for what rounding gives; the check is that nothing a lab manager
reads carries an exponent (``1.47e+03``) where a thousands separator does ("1,470").
"""

import pytest

from services.numbers_text import significant
from services.render.tables import measured_text
from services.requirement_check import value_text
from services.rules.common import fmt_mm


@pytest.mark.parametrize("value, figures, text", [
    (1466.9, 3, "1,470"), (0.0159, 3, "0.0159"), (6.2, 3, "6.2"), (-123456, 3, "-123,000"),
    (999.7, 3, "1,000"),       # rounds up past a thousand: not '1e+03'
    (12345, 4, "12,340"),      # a tie: rounded to even, as Python's g format does
    (1234.4, 4, "1,234"), (0.5, 4, "0.5"), (0.0, 3, "0"), (25.0, 4, "25"),
])
def test_significant_figures_without_exponents(value, figures, text):
    assert significant(value, figures) == text
    assert float(text.replace(",", "")) == float(f"{value:.{figures}g}")  # the same rounding as Python's 'g'


def test_targets_findings_and_limits_read_without_exponents():
    assert value_text(12345.0, "EUR") == "12,340 EUR"  # was '1.234e+04 EUR'
    assert value_text(1.25, "x") == "1.25x" and value_text(None, "mm") == "-"
    assert fmt_mm(1200.0) == "1,200" and fmt_mm(0.12) == "0.12"
    assert measured_text({"measured": 1466.9, "limit": 1200.0, "unit": "mm"}) == "1,470 mm against a limit of 1,200 mm"


def test_the_terminal_summary_writes_the_clear_aperture_as_the_page_does():
    """It read '2827.4 mm2'; four figures with the thousands separated, as a reader writes an area."""
    from services.render.text import report_text

    report = {"design": {"name": "lens.stl", "triangles": 20462, "bbox_mm": [60, 60, 4.2]}, "layers": {"count": 84},
              "verdict": "printable", "printer": {"name": "Bay 1"}, "material": {"name": "resin"}, "findings": [],
              "optics": {"frequencies_ghz": [140.0], "transmission_loss_db": [2.47],
                         "clear_aperture": {"how": "outline", "area_mm2": 2827.43}}}
    assert "  clear aperture (outline): 2,827 mm2" in report_text(report).splitlines()
