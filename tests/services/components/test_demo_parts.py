"""The brief's three demo designs build as closed solids on the demo lab's resin printer."""

import pytest

from services import catalogue
from services.components import build_component

BAY1 = catalogue.printer("bay1-lcd-resin")
RESIN = catalogue.material("standard-resin")


@pytest.mark.parametrize("kind, params", [
    ("zoned", {"diameter_mm": 60, "focal_length_mm": 72, "freq_ghz": 140}),
    ("graded-index", {"diameter_mm": 30, "focal_length_mm": 30, "freq_ghz": 300, "cell": "hole"}),
    ("spiral", {"diameter_mm": 40, "freq_ghz": 150, "charge": 1}),
])
def test_the_demo_designs_build_watertight(kind, params):
    """Each demo part is one watertight body with no intake findings (a needle triangle once opened the hole plate)."""
    part = build_component(kind, params, material=RESIN, printer=BAY1).part
    assert part.watertight and part.bodies == 1 and not part.findings and part.volume_mm3 > 0
