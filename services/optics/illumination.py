"""The Gaussian illumination on the part's input face, its clear aperture and the spillover."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from services.optics import gaussian
from services.optics.cells import CellGrid

DEFAULT_EDGE_TAPER_DB = 10.0  # common practice for a Gaussian-fed lens (near Goldsmith's 10.9 dB optimum)


@dataclass(frozen=True, slots=True, eq=False)
class Illumination:
    """A Gaussian beam with its waist on the part's input face (flat phase), seen through the aperture.

    amplitude : (ny, nx) exp(-r^2 / w^2) at the cell centres
    aperture : (ny, nx) bool, the clear aperture (the part's footprint, holes filled)
    """

    beam_radius_mm: float
    rim_radius_mm: float
    source: str
    amplitude: np.ndarray
    aperture: np.ndarray
    cell_mm: float

    @property
    def edge_taper_db(self) -> float:
        return float(gaussian.edge_taper_db(self.rim_radius_mm, self.beam_radius_mm))

    def amplitude_on(self, grid: CellGrid) -> np.ndarray:
        """Return exp(-r^2 / w^2) at the centres of another grid about the same axis (e.g. sub-cells)."""
        return np.exp(-grid.radius_mm() ** 2 / self.beam_radius_mm**2)

    @property
    def weights(self) -> np.ndarray:
        """Return the illumination power per cell inside the clear aperture (zero outside)."""
        return self.amplitude**2 * self.aperture

    @property
    def aperture_power(self) -> float:
        """Return the illumination power falling on the clear aperture (amplitude^2 x mm^2)."""
        return float(self.weights.sum() * self.cell_mm**2)

    @property
    def spillover_fraction(self) -> float:
        """Return the share of the beam's power (pi w^2 / 2 in all) that misses the clear aperture."""
        total = np.pi * self.beam_radius_mm**2 / 2  # integral of exp(-2 r^2 / w^2) over the plane
        return float(min(1.0, max(0.0, 1 - self.aperture_power / total)))

    def to_dict(self) -> dict:
        spill = self.spillover_fraction
        return {
            "kind": "gaussian",
            "set_by": self.source,
            "beam_radius_mm": round(self.beam_radius_mm, 4),
            "waist_at": "the part's input face (flat phase front)",
            "rim_radius_mm": round(self.rim_radius_mm, 4),
            "edge_taper_db": round(self.edge_taper_db, 3),
            "spillover_fraction": round(spill, 6),
            "clear_aperture_mm2": round(float(self.aperture.sum() * self.cell_mm**2), 3),
        }


def illumination_for(*, edge_taper_db: float | None, beam_waist_mm: float | None, rim_radius_mm: float,
                     grid: CellGrid, aperture: np.ndarray) -> Illumination:
    """Return the illumination from a waist radius, or from an edge taper at the rim (10 dB if neither)."""
    if beam_waist_mm is not None:
        w, source = float(beam_waist_mm), "beam_waist_mm"
    else:
        taper = DEFAULT_EDGE_TAPER_DB if edge_taper_db is None else float(edge_taper_db)
        source = "edge_taper_db" if edge_taper_db is not None else "default 10 dB edge taper (common practice)"
        w = float(gaussian.beam_radius_for_taper_mm(rim_radius_mm, taper))
    amplitude = np.exp(-grid.radius_mm() ** 2 / w**2)
    return Illumination(w, float(rim_radius_mm), source, amplitude, aperture, grid.cell_mm)
