"""Material use: the support projection on the layer stack, and millilitres, grams and cost."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from services.errors import UnusableInput
from services.layers import LayerStack
from services.profiles import Material


@dataclass(frozen=True, slots=True)
class MaterialUse:
    """Material one part uses, waste included."""

    part_ml: float
    support_ml: float
    material_ml: float
    material_g: float
    cost: float


def support_columns_mm2(stack: LayerStack) -> np.ndarray:
    """Return each layer's empty area that lies under solid higher in the same column.

    This is voxel column counting (manufacturing.md §2.2): every solid pixel not over solid in the
    layer below is projected down to the next solid or the plate. An empty voxel is filled that way
    exactly when some solid lies above it in its column, so the support of layer k is
    ``~L_k & (top > k)``, with ``top`` the highest solid layer of each column.
    """
    out = np.zeros(stack.count, dtype=np.float64)
    top = np.full(stack.shape, -1, dtype=np.int32 if stack.count < 2 ** 31 else np.int64)
    for _, last, (r0, c0), box in stack.run_boxes():  # each run's solid box only, not the whole frame
        np.copyto(top[r0:r0 + box.shape[0], c0:c0 + box.shape[1]], last, where=box)
    solid_layers = np.rint(stack.thickness_mm / stack.layer_height_mm).astype(np.int64)
    # Only columns with fewer solid layers than their top have a gap to fill; often there are none.
    columns = np.flatnonzero((top + 1 > solid_layers).ravel())
    if columns.size == 0:
        return out
    top_of = top.ravel()[columns]
    for first, last, mask in stack.runs():
        # An empty pixel of a run has its top solid either above the run or below it, never inside.
        out[first:last + 1] = np.count_nonzero(top_of[~mask.ravel()[columns]] > last)
    return out * stack.pixel_mm**2


def material_use(*, part_mm3: float, support_mm3: float, material: Material) -> MaterialUse:
    """Return the material one part uses, with the waste factor, its mass and its cost."""
    # material = (V_part + f_sup V_sup) rho price (1 + waste), manufacturing.md §4 common structure;
    # support_mm3 already carries the support density factor f_sup.
    used_ml = (part_mm3 + support_mm3) / 1000.0 * (1.0 + material.waste_factor)
    used_g = used_ml * material.density_g_cm3
    if material.price_unit == "kg":
        cost = used_g / 1000.0 * material.price
    elif material.price_unit == "l":
        cost = used_ml / 1000.0 * material.price
    else:
        raise UnusableInput("bad_material",
                            f"Material {material.slug!r}: price unit must "
                            f"be 'kg' or 'l', not {material.price_unit!r}.")
    return MaterialUse(part_ml=part_mm3 / 1000.0, support_ml=support_mm3 / 1000.0,
                       material_ml=used_ml, material_g=used_g, cost=cost)
