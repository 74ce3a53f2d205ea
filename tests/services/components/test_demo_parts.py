"""The brief's three demo designs build as closed solids (on the demo lab's resin printer where it can make them)."""

import pytest

from services import catalogue
from services.components import build_component
from services.errors import UnusableInput

BAY1 = catalogue.printer("bay1-lcd-resin")
RESIN = catalogue.material("standard-resin")
PLATE_300 = {"diameter_mm": 30, "focal_length_mm": 30, "freq_ghz": 300, "cell": "hole"}


@pytest.mark.parametrize("kind, params, printer", [
    ("zoned", {"diameter_mm": 60, "focal_length_mm": 72, "freq_ghz": 140}, BAY1),
    # Bay 1 cannot make the 300 GHz plate's holes (below); its geometry is still built, at the largest period
    # below the diffraction limit, without printer limits.
    ("graded-index", {**PLATE_300, "period_mm": 0.595}, None),
    ("spiral", {"diameter_mm": 40, "freq_ghz": 150, "charge": 1}, BAY1),
])
def test_the_demo_designs_build_watertight(kind, params, printer):
    """Each demo part is one watertight body with no intake findings (a needle triangle once opened the hole plate)."""
    part = build_component(kind, params, material=RESIN, printer=printer).part
    assert part.watertight and part.bodies == 1 and not part.findings and part.volume_mm3 > 0


def test_bay1_refuses_the_300_ghz_plate_naming_its_smallest_hole():
    """Holes of at least 0.5 mm (its minimum hole along z) with 0.15 mm walls need a period of about 0.66 mm, above
    the 0.595 mm diffraction limit at 300 GHz: no period fits, and the sentence says what does."""
    with pytest.raises(UnusableInput) as info:
        build_component("graded-index", PLATE_300, material=RESIN, printer=BAY1)
    assert info.value.code == "period_conflict"
    assert "0.5 mm smallest hole, 0.15 mm smallest wall" in info.value.message
    assert "choose the other cell kind" in info.value.message and info.value.message.endswith(".")
