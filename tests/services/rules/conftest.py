"""Fixtures for the rule tests: test printers with chosen limits, and parts turned into layer stacks."""

import pytest

from services.layers import build_layer_stack, orient_part
from services.profiles import PrinterProfile


@pytest.fixture(scope="session")
def printer():
    """Return printer(process="vat_photopolymerisation", **rules) -> PrinterProfile with only those rules."""
    def make(process: str = "vat_photopolymerisation", pixel_mm: float = 0.05, **rules) -> PrinterProfile:
        technology = {"vat_photopolymerisation": "lcd_masked", "material_extrusion": "filament"}[process]
        return PrinterProfile(
            slug="test", name="Test printer", process=process, technology=technology, pixel_mm=pixel_mm,
            layer_height_mm=0.05, layer_heights_mm=(0.05,), build_volume_mm=(100.0, 100.0, 100.0), rules=rules,
        )
    return make


@pytest.fixture(scope="session")
def stack_of(make_part):
    """Return stack_of(manifold, pixel_mm=0.05, layer_height_mm=0.05) -> (part, LayerStack), resting on z = 0."""
    def make(shape, pixel_mm: float = 0.05, layer_height_mm: float = 0.05):
        part = orient_part(make_part(shape), "+z")
        return part, build_layer_stack(part, pixel_mm=pixel_mm, layer_height_mm=layer_height_mm)
    return make


@pytest.fixture(scope="session")
def run_check():
    """Return run_check(module, part, stack, printer) -> RuleOutput of that rule family."""
    def run(module, part, stack, printer):
        return module.check(stack=stack, part=part, printer=printer)
    return run
