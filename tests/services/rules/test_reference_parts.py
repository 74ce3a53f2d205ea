"""The reference parts of the benchmark on the starter resin printer: what they should and should not raise."""

import sys
from pathlib import Path

import pytest

from services import catalogue
from services.rules import run_rules

sys.path.insert(0, str(Path(__file__).resolve().parents[3] / "benchmarks"))
import make_reference_parts  # noqa: E402


@pytest.mark.slow
def test_the_zoned_lens_raises_no_false_thin_gap_hole_or_island_findings(stack_of):
    """Zone crests and groove roots are edges of wide material; the grooves are cups while printing.

    The 60 mm lens (benchmarks/make_reference_parts.py) has no feature under 0.15 mm, no gap under
    0.3 mm and no hole, island or overhang by construction (every zone rises from the base with a
    vertical step); its annular grooves are open only upwards, so a vat printer's film seals them
    at each peel (manufacturing notes section 2.2, cupping).
    """
    part, stack = stack_of(make_reference_parts.zoned_lens(), pixel_mm=0.05, layer_height_mm=0.05)
    out = run_rules(stack=stack, part=part, printer=catalogue.printer("bay1-lcd-resin"))
    assert {(f.rule, f.severity) for f in out.findings} == {("trapped_volume", "caution")}
    assert out.summary["overhang"]["support_volume_mm3"] == 0.0
