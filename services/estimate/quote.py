"""The quote: line items for a job of n parts over as many builds as it needs, and the quantity table.

Structure after Hopkinson & Dickens 2003 (machine time x rate + labour + material) and Ruffo, Tuck &
Hague 2006 (build cost shared by the parts in the build, hence the saw-tooth unit cost), with the
failure allowance C / (1 - p_fail) of Ding, Baumers, Clark & Wildman 2021 (manufacturing.md §4).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from services.errors import UnusableInput
from services.profiles import Material, PrinterProfile

COST_KEYS = ("machine_rate_per_h", "labour_rate_per_h", "setup_labour_h", "post_process_per_build",
             "post_process_per_part", "consumables_per_build", "margin", "p_fail")


@dataclass(frozen=True, slots=True)
class CostLine:
    item: str
    amount: float
    detail: str

    def to_dict(self) -> dict:
        return {"item": self.item, "amount": self.amount, "detail": self.detail}


@dataclass(frozen=True, slots=True)
class Cost:
    """Line items and their total; amounts are rounded to cents and the total is their sum."""

    currency: str
    total: float
    lines: tuple[CostLine, ...]

    def to_dict(self) -> dict:
        return {"currency": self.currency, "total": self.total, "lines": [line.to_dict() for line in self.lines]}


@dataclass(frozen=True, slots=True)
class QuantityRow:
    """One row of the quantity table; ``fills_builds_at`` is the quantity that fills those builds."""

    quantity: int
    builds: int
    per_part: float
    total: float
    print_time_s: float
    fills_builds_at: int

    def to_dict(self) -> dict:
        return {"quantity": self.quantity, "builds": self.builds, "per_part": self.per_part, "total": self.total,
                "print_time_s": round(self.print_time_s, 1), "fills_builds_at": self.fills_builds_at}


def rates_of(printer: PrinterProfile, material: Material) -> dict:
    """Return the profile's cost settings, refusing missing values and mixed currencies."""
    cost = printer.cost
    missing = [k for k in COST_KEYS if not isinstance(cost.get(k), (int, float))]
    if missing:
        raise UnusableInput("bad_profile",
                            f"Printer profile {printer.slug!r} lacks the cost settings "
                            f"{', '.join(missing)}; the lab manager sets them.")
    if not 0 <= cost["p_fail"] < 1:
        raise UnusableInput("bad_profile",
                            f"Printer profile {printer.slug!r}: the failure "
                            "probability must be at least 0 and below 1.")
    currency = cost.get("currency", material.currency)
    if currency != material.currency:
        raise UnusableInput("currency_mismatch",
                            f"Printer profile {printer.slug!r} charges in {currency} but material "
                            f"{material.slug!r} is priced in {material.currency}; use one currency.")
    return {**cost, "currency": currency}


def job_cost(*, quantity: int, per_build: int, rates: dict, material_per_part: float,
             build_time_s: Callable[[int], float], material_note: str = "") -> tuple[Cost, float]:
    """Return the cost of ``quantity`` parts in full builds of ``per_build`` and one partial build, and the machine time."""
    full, rest = divmod(quantity, per_build)
    builds = full + (rest > 0)
    time_s = full * build_time_s(per_build) + (build_time_s(rest) if rest else 0.0)
    raw = [("material", quantity * material_per_part, f"{quantity} x {material_note or f'{material_per_part:.2f}'}"),
           *_running_lines(rates, quantity=quantity, builds=builds, time_s=time_s)]
    subtotal = sum(amount for _, amount, _ in raw)
    # Expected cost of a good part = C / (1 - p_fail) (Ding et al. 2021): the allowance is the difference.
    p_fail = rates["p_fail"]
    allowance = subtotal * p_fail / (1 - p_fail)
    raw.append(("failure_allowance", allowance, f"{p_fail:.0%} failure probability"))
    raw.append(("margin", (subtotal + allowance) * rates["margin"], f"{rates['margin']:.0%}"))
    lines = tuple(CostLine(item, round(amount, 2), detail) for item, amount, detail in raw)
    return Cost(currency=rates["currency"], total=round(sum(line.amount for line in lines), 2), lines=lines), time_s


def _running_lines(rates: dict, *, quantity: int, builds: int, time_s: float) -> list[tuple[str, float, str]]:
    """Return the machine, labour, post-processing and consumables lines as (item, amount, detail)."""
    hours = time_s / 3600
    machine, labour, setup_h = rates["machine_rate_per_h"], rates["labour_rate_per_h"], rates["setup_labour_h"]
    per_build, per_part = rates["post_process_per_build"], rates["post_process_per_part"]
    consumables = rates["consumables_per_build"]
    return [
        ("machine_time", machine * hours, f"{hours:.2f} h x {machine:.2f}/h"),
        ("setup_labour", builds * setup_h * labour, f"{builds} x {setup_h:.2f} h x {labour:.2f}/h"),
        ("post_processing_build", builds * per_build, f"{builds} x {per_build:.2f}"),
        ("post_processing_part", quantity * per_part, f"{quantity} x {per_part:.2f}"),
        ("consumables", builds * consumables, f"{builds} x {consumables:.2f}"),
    ]


def quantity_table(*, quantities: tuple[int, ...], per_build: int, rates: dict, material_per_part: float,
                   build_time_s: Callable[[int], float], material_note: str = "") -> tuple[QuantityRow, ...]:
    """Return one row per quantity: builds needed, total and per-part cost, and the full-build quantity."""
    if any(q < 1 for q in quantities):
        raise UnusableInput("bad_quantity", "Quantities must be whole numbers of at least 1.")
    if per_build < 1:
        return ()
    rows = []
    for q in quantities:
        cost, time_s = job_cost(quantity=q, per_build=per_build, rates=rates, material_per_part=material_per_part,
                                build_time_s=build_time_s, material_note=material_note)
        builds = math.ceil(q / per_build)
        rows.append(QuantityRow(quantity=q, builds=builds, per_part=round(cost.total / q, 2), total=cost.total,
                                print_time_s=time_s, fills_builds_at=builds * per_build))
    return tuple(rows)
