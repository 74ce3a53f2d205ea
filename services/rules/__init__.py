"""Design-rule checks on the as-printed layer stack, one module per rule family.

Each rule module offers ``check(*, stack, part, printer) -> RuleOutput``. ``run_rules`` runs
them in order and gathers their findings and pictures.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from services.findings import Finding


@dataclass(frozen=True, slots=True)
class RuleOutput:
    """What one rule family found: findings, their pictures (name -> PNG) and figures for the report."""

    findings: tuple[Finding, ...] = ()
    figures: dict = field(default_factory=dict)
    summary: dict = field(default_factory=dict)


def rule_checks() -> list[tuple[str, Callable]]:
    """Return (name, check) for every rule family that works on the layer stack, in run order."""
    from services.rules import registry

    return list(registry.CHECKS)


def run_rules(*, stack, part, printer, progress: Callable[[float], None] | None = None) -> RuleOutput:
    """Run every enabled rule family on the layer stack and gather the outputs."""
    from services.rules import registry

    checks = rule_checks()
    # The layer-stack families share one pass: run it first, so progress follows the real work.
    registry.prepare(stack=stack, part=part, printer=printer, progress=progress)
    findings: list[Finding] = []
    figures: dict = {}
    summary: dict = {}
    for i, (name, check) in enumerate(checks):
        out = check(stack=stack, part=part, printer=printer)
        findings.extend(out.findings)
        figures.update(out.figures)
        if out.summary:
            summary[name] = out.summary
        if progress:
            progress(0.9 + 0.1 * (i + 1) / len(checks))  # the shared pass reported 0..0.9
    return RuleOutput(tuple(findings), figures, summary)
