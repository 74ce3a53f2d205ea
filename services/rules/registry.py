"""The rule families run on every layer stack, in order.

Every family works on one shared pass over the stack (``services.rules.scan``): the first family's
``check`` runs all enabled collectors together and the others pick up their own output.
"""

from services.rules import aspect_ratio, island, min_feature, min_gap, min_hole, overhang, trapped_volume

COLLECTORS = {
    "min_feature": min_feature.Collector,
    "min_gap": min_gap.Collector,
    "min_hole": min_hole.Collector,
    "aspect_ratio": aspect_ratio.Collector,
    "overhang": overhang.Collector,
    "island": island.Collector,
    "trapped_volume": trapped_volume.Collector,
}



def _shared(name: str):
    def check(*, stack, part, printer):
        return run_family(name, stack=stack, part=part, printer=printer)
    check.__doc__ = f"Return the {name} findings from the shared pass over the stack."
    return check


# The one list of the families that run, in order; each takes its output from the shared pass.
CHECKS: list = [(name, _shared(name)) for name in COLLECTORS]


def run_family(name: str, *, stack, part, printer):
    """Return one family's RuleOutput from the shared pass (run now, or kept from the last call)."""
    from services.rules import scan

    return scan.outputs(stack, part, printer, COLLECTORS)[name]


def prepare(*, stack, part, printer, progress=None) -> None:
    """Run the shared pass now, reporting progress (0..1) as its runs go by."""
    from services.rules import scan

    scan.outputs(stack, part, printer, COLLECTORS, progress=progress)
