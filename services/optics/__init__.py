"""Optics of a printed quasi-optical part: what the material and the print do to the beam."""

from services.optics.pipeline import OpticsResult, optics_report

__all__ = ["OpticsResult", "optics_report"]
