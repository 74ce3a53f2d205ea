"""Numbers as a reader writes them: a few significant figures, thousands separated, never in exponent form.

A finding's measure, a target's value or a part's size can pass a thousand (a 1,470 mm2 overhang, a cost
target of 12,345 EUR, a part read in the wrong unit and 1,524 mm across); Python's ``g`` format would write
those as ``1.47e+03``, which no report a lab manager reads should show.
"""

from __future__ import annotations

import math


def significant(value: float, figures: int = 3) -> str:
    """Return a value to ``figures`` significant figures: 0.0159, 6.2, 1,470, -123,000 (not 1.47e+03)."""
    rounded = float(f"{value:.{figures}g}")  # rounds first, so 999.7 becomes 1,000 and not 1e+03
    if math.isfinite(rounded) and 1e3 <= abs(rounded) < 1e15:
        return f"{rounded:,.0f}"
    return f"{value:.{figures}g}"
