"""Units from physics: a part's size against its design wavelength and the printer's build volume.

Intake can only say a part is implausible for any optic (below 1 mm or beyond 1 m). Once the design
frequency is known, a much sharper test applies: a quasi-optical part is several wavelengths across,
so a lens read in the wrong unit (a 60 mm lens exported in inches and read as 2.4 mm) shows itself.
"""

from __future__ import annotations

import numpy as np

from services.findings import Finding
from services.numbers_text import significant
from services.intake import UNITS
from services.optics.materials import wavelength_mm

# Below about 3 wavelengths a part diffracts more than it focuses: Gaussian-beam optics want a
# diameter of at least 3 to 4 beam radii, each several wavelengths (Goldsmith 1998, ch. 6; from memory).
MIN_WAVELENGTHS = 3.0
# Quasi-optical parts are most often some tens of wavelengths across (common practice); among units that
# all give a plausible size, the one nearest this is named first.
TYPICAL_WAVELENGTHS = 20.0


def units_findings(*, extent_mm: float, unit: str, freqs_ghz, build_volume_mm) -> list[Finding]:
    """Return a ``units`` caution when the part is too small for its wavelength or too big by a unit factor.

    extent_mm : the part's largest extent as read; unit : the unit it was read in (a key of intake.UNITS);
    freqs_ghz : the design frequencies (empty: nothing to judge by); build_volume_mm : (x, y, z).
    """
    if not len(freqs_ghz) or unit not in UNITS or extent_mm <= 0:
        return []
    lam = float(wavelength_mm(max(float(f) for f in freqs_ghz)))  # the shortest wavelength is the kindest test
    largest_mm = float(max(build_volume_mm))
    small = extent_mm < MIN_WAVELENGTHS * lam
    if not small and extent_mm <= largest_mm:
        return []
    better = plausible_units(extent_mm / UNITS[unit], lam, largest_mm, exclude=unit)
    if not better:
        return []
    if small:
        why = (f"is {significant(extent_mm)} mm across, {extent_mm / lam:.2g} wavelengths at {max(freqs_ghz):g} GHz; "
               f"a quasi-optical part is at least {MIN_WAVELENGTHS:g} wavelengths across")
    else:
        why = f"is {significant(extent_mm, 4)} mm across, beyond the printer's largest build dimension of {largest_mm:g} mm"
    named = "; ".join(f"read in {u} it is {significant(size, 4)} mm ({size / lam:.0f} wavelengths)" for u, size in better)
    return [Finding("units", "caution", f"Read in {unit}, the part {why}. Was it drawn in another unit? {named}. "
                                        f"Upload it again with the right unit.",
                    measured=extent_mm, limit=MIN_WAVELENGTHS * lam if small else largest_mm, unit="mm")]


def plausible_units(raw_extent: float, wavelength: float, largest_mm: float, *, exclude: str) -> list[tuple[str, float]]:
    """Return (unit, size in mm) for every unit that makes the part 3 wavelengths to the build volume across.

    The unit giving a size nearest some tens of wavelengths comes first.
    """
    fits = [(u, raw_extent * s) for u, s in UNITS.items()
            if u != exclude and MIN_WAVELENGTHS * wavelength <= raw_extent * s <= largest_mm]
    return sorted(fits, key=lambda us: abs(np.log(us[1] / (TYPICAL_WAVELENGTHS * wavelength))))
