"""Windows: a flat slab for a band, bare or with a matching layer on each face.

The matching layer is a quarter-wave layer of index sqrt(n), t = lambda0 / (4 sqrt(n)) (Pozar
2012 section 5.4; optics notes section 2.1), made of subwavelength grooves, or a graded layer of
pyramids. The grooves start from the fill that gives that index by zeroth-order effective-medium
theory (Rytov 1956), which holds only for periods well below the wavelength in the material; at the
default period, just under the no-diffraction limit, a face so designed reflects ten times what the
effective medium says. So their fill and depth are then set, and their band figures computed, by the
rigorous lamellar-grating solver (``optics.lamellar``, the Fourier modal method). The pyramids stay
an effective-medium design (crossed pyramids need a two-dimensional solver). The bare slab defaults
to a half-wave multiple, m lambda0 / (2 n), reflectionless at the band centre.
"""

from __future__ import annotations

import manifold3d as m3d
import numpy as np

from services.components.base import Component, Context, finish, smallest_printable_mm
from services.components.formulas import Medium, largest_micron_below, medium_at, no_diffraction_period_mm
from services.components.solid import (CHORD_TOL_MM, check_fits, checked, disc, extrude_xz_profile, intersect,
                                       subtract, union)
from services.errors import UnusableInput
from services.optics import lamellar
from services.optics.effective_medium import DEFAULT_MODEL, effective_permittivity, rytov_parallel, rytov_perpendicular
from services.optics.materials import complex_index
from services.optics.transfer import cascade, s_parameters

MIN_CORE_MM = 1.0  # thinnest default core, for handling (engineering judgement)
GEOMETRIC_MARGIN = 0.02  # without a printer: smallest ridge, groove or pyramid tip, as a share of the period
# Pyramid layers aim to keep each face's reflection under 1 % (-20 dB) across the band (common practice).
PYRAMID_TARGET_REFLECTANCE = 0.01
PYRAMID_SLICES = 24
SINK_MM = 0.05  # matching layers reach this far into the core, so unions meet no coincident faces
# Diffraction orders in the groove design's search: its faces' reflectance within 2e-5 of 41 orders' (the band
# table's) on the default 130-150 GHz resin window (measured). The search's own tolerances, in fill and in depth:
DESIGN_ORDERS = 21
FILL_TOL, DEPTH_TOL_MM = 1e-4, 1e-4
# Built for a printer, the lower face's texture (grooves or pyramids) is closed at the rim by a solid ring this many
# of the printer's smallest walls wide (engineering judgement): the core's edge then rests on material all round,
# where it would otherwise start in mid-air beyond the texture's ends.
RIM_WALLS = 2
BRIDGE_TRIES = 6  # periods tried, each shorter, for grooves whose ceilings the printer can bridge


def build_window(ctx: Context) -> Component:
    """Return the window with its matching layers, and its band performance."""
    p = ctx.params
    band = _band(ctx)
    centre = band[1]
    # Nine frequencies across the band for the reflection of one face (the pyramid design target).
    sweep = [medium_at(ctx.material, f) for f in np.linspace(band[0].freq_ghz, band[2].freq_ghz, 9)]
    core, order = _core_thickness(p, centre)
    period, limit = _period(p, band[2], ctx.material.name)
    layer = _matching_layer(p, centre, sweep, period, ctx.printer)
    period, layer, rule = _bridged(p, centre, sweep, period, layer, ctx.printer)
    depth = layer.get("depth_mm", 0.0)
    width = p["diameter_mm"]
    check_fits((width, width, core + 2 * depth), ctx.volumes, "window")
    solid = _window_solid(p, core, period, layer, ctx.printer)
    derived = {"design_freq_ghz": centre.freq_ghz, "thickness_mm": core, "half_wave_order": order,
               "total_thickness_mm": core + 2 * depth, "period_mm": period if p["matching"] != "none" else None,
               "period_limit_mm": limit, "period_rule": rule, **{k: v for k, v in layer.items() if k != "slices"},
               "band": _band_table(band, core, layer, period, p["groove_field"]),
               "max_face_reflectance": _face_worst(sweep, layer, period, p["groove_field"])}
    return finish(ctx, solid, centre, derived, focal_length_mm=None)


def _band(ctx: Context) -> tuple[Medium, Medium, Medium]:
    """Return the material at the band's bottom, centre and top."""
    p = ctx.params
    if p["freq_max_ghz"] <= p["freq_min_ghz"]:
        raise UnusableInput("bad_parameter", f"The highest frequency ({p['freq_max_ghz']:g} GHz) must lie above the "
                            f"lowest ({p['freq_min_ghz']:g} GHz).")
    centre = (p["freq_min_ghz"] + p["freq_max_ghz"]) / 2
    return tuple(medium_at(ctx.material, f) for f in (p["freq_min_ghz"], centre, p["freq_max_ghz"]))


def _core_thickness(p: dict, centre: Medium) -> tuple[float, int | None]:
    """Return the core thickness: given, or the thinnest half-wave multiple of at least 1 mm."""
    if p["thickness_mm"]:
        return p["thickness_mm"], None
    half = centre.wavelength_mm / (2 * centre.n)
    order = max(1, int(np.ceil(MIN_CORE_MM / half - 1e-9)))
    return order * half, order


def _period(p: dict, top: Medium, name: str) -> tuple[float, float]:
    """Return the texture period (given, or just under the no-diffraction limit at the band's top)."""
    limit = float(no_diffraction_period_mm(top.wavelength_mm, top.n, "square"))
    period = p["period_mm"] or largest_micron_below(limit)
    if p["matching"] != "none" and period >= limit:
        raise UnusableInput("period_too_large", f"A period of {period:g} mm lets diffraction orders propagate at "
                            f"{top.freq_ghz:g} GHz in {name} (n = {top.n:.4f}); use a period below {limit:.4f} mm.")
    return period, limit


def widest_bridge_mm(printer) -> float | None:
    """Return the widest gap a layer may span on this printer without a flat start: four self-supporting steps
    from each side (``rules.overhang``: dz / tan(angle) a step), less a pixel; None without a printer or angle."""
    from services.rules.overhang import FLAT_STEPS

    angle = (printer.rule("overhang") or {}).get("self_supporting_deg") if printer is not None else None
    if not angle or angle >= 90:
        return None
    return 2 * FLAT_STEPS * printer.layer_height_mm / np.tan(np.radians(angle)) - printer.pixel_mm


def _bridged(p: dict, centre: Medium, sweep: list[Medium], period: float, layer: dict, printer):
    """Return (period, layer, why the period): with grooves, no period given and a printer, the period shortened from
    the no-diffraction limit until the lower face's core can span its grooves layer by layer; the grooves' fill
    scarcely changes with the period, so each try shortens it by the share the groove is too wide."""
    default = "the largest below the no-diffraction limit at the band's top"
    if p["matching"] == "none":
        return period, layer, None
    if p["period_mm"]:
        return period, layer, "given"
    bridge = widest_bridge_mm(printer) if p["matching"] == "grooves" else None
    if bridge is None:
        return period, layer, default
    for _ in range(BRIDGE_TRIES):
        if layer["groove_width_mm"] <= bridge:
            break
        period = largest_micron_below(period * bridge / layer["groove_width_mm"])
        layer = _matching_layer(p, centre, sweep, period, printer)
    if layer["groove_width_mm"] > bridge:
        return period, layer, default
    return period, layer, (f"shortened from the no-diffraction limit until the grooves, {layer['groove_width_mm']:.3g} mm "
                           f"wide, are ones the printer spans under the core without a flat start (at most {bridge:.3g} mm)")


def _matching_layer(p: dict, centre: Medium, sweep: list[Medium], period: float, printer) -> dict:
    if p["matching"] == "grooves":
        return _grooves(p, centre, sweep, period, printer)
    if p["matching"] == "pyramids":
        return _pyramids(p, sweep, period, printer)
    return {"matching": "none"}


def _limits(period: float, printer) -> tuple[float, float]:
    """Return the smallest ridge (feature) and groove (gap) the texture may have."""
    feature = gap = GEOMETRIC_MARGIN * period
    if printer is not None:
        feature = max(feature, (printer.rule("min_feature") or {}).get("supported_mm") or 0.0)
        gap = max(gap, (printer.rule("min_gap") or {}).get("xy_mm") or 0.0)
    if feature + gap > period:
        raise UnusableInput("texture_unprintable", f"A {period:g} mm period cannot hold a {feature:g} mm ridge and a "
                            f"{gap:g} mm groove; choose a finer printer or no matching layer.")
    return feature, gap


def _grooves(p: dict, centre: Medium, sweep: list[Medium], period: float, printer) -> dict:
    """Return the groove layer: the fill and depth that keep each face's worst reflection across the band least,
    by the rigorous lamellar solver, within what the printer can make; the effective-medium quarter-wave layer
    (fill for eps_eff = n, depth lambda / (4 sqrt n)) is where the search starts and is kept for comparison."""
    n, eps, field = centre.n, centre.eps_r, p["groove_field"]
    if field == "along":
        fill_emt = (n - 1) / (eps - 1)                # from eps_par = f eps + (1 - f) = n
    else:
        fill_emt = (1 - 1 / n) / (1 - 1 / eps)        # from 1 / eps_perp = f / eps + (1 - f) = 1 / n
    depth_emt = centre.wavelength_mm / (4 * np.sqrt(n))
    feature, gap = _limits(period, printer)
    free = (GEOMETRIC_MARGIN, 1 - GEOMETRIC_MARGIN)
    fill_design, depth_design = _least_reflecting_grooves(sweep, period, field, (fill_emt, depth_emt), free)
    fill, depth = fill_design, depth_design
    allowed = (feature / period, 1 - gap / period)
    if not allowed[0] <= fill_design <= allowed[1]:  # the printer cannot make it: the best it can make instead
        fill, depth = _least_reflecting_grooves(sweep, period, field,
                                                (float(np.clip(fill_design, *allowed)), depth_design), allowed)
    ridge = fill * period
    rule = rytov_parallel if field == "along" else rytov_perpendicular
    return {"matching": "grooves", "depth_mm": depth, "fill_design": fill_design, "depth_design_mm": depth_design,
            "fill": fill, "ridge_width_mm": ridge, "groove_width_mm": period - ridge,
            "design_model": "rigorous lamellar grating (Fourier modal method)",
            "fill_effective_medium": fill_emt, "depth_effective_medium_mm": depth_emt, "eps_eff_target": n,
            "eps_eff": float(rule(fill, eps)),
            "max_face_reflectance_effective_medium_design": _face_worst(
                sweep, {"matching": "grooves", "fill": float(np.clip(fill_emt, *allowed)), "depth_mm": depth_emt},
                period, field)}


def _least_reflecting_grooves(sweep: list[Medium], period: float, field: str, start: tuple[float, float],
                              fills: tuple[float, float]) -> tuple[float, float]:
    """Return the (fill, depth) in ``fills`` x (0, one wavelength] whose worst face reflection over the sweep is
    least (Nelder-Mead from ``start``; a fill within the search's tolerance of a bound is put on it)."""
    from scipy.optimize import minimize

    top = sweep[len(sweep) // 2].wavelength_mm

    def worst(x):
        return max(_groove_face(m, float(x[0]), float(x[1]), period, field, DESIGN_ORDERS) for m in sweep)

    found = minimize(worst, np.array(start), method="Nelder-Mead", bounds=(fills, (DEPTH_TOL_MM, top)),
                     options={"xatol": min(FILL_TOL, DEPTH_TOL_MM), "fatol": 1e-7})
    fill, depth = (float(v) for v in found.x)
    for bound in fills:
        if abs(fill - bound) <= 2 * FILL_TOL:
            fill = bound
    return fill, depth


def _groove_face(medium: Medium, fill: float, depth: float, period: float, field: str,
                 orders: int = lamellar.ORDERS) -> float:
    """Return the reflectance from air through a groove layer into the bulk material, rigorously."""
    eps = complex_index(medium.eps_r, medium.tan_delta) ** 2
    return lamellar.zero_order([lamellar.Grating(eps, fill, depth)], period_mm=period, freq_ghz=medium.freq_ghz,
                               polarisation=field, exit_eps=eps, orders=orders).reflectance


def _pyramids(p: dict, sweep: list[Medium], period: float, printer) -> dict:
    """Return the pyramid layer: base and tip sizes from the printer, height from the band's reflection."""
    feature, gap = _limits(period, printer)
    base, tip = period - gap, feature
    height = p["pyramid_height_mm"] or _pyramid_height(sweep, period, base, tip)
    if printer is not None and not p["pyramid_height_mm"]:
        height = float(np.ceil(round(height / printer.layer_height_mm, 6)) * printer.layer_height_mm)
    return {"matching": "pyramids", "depth_mm": height, "pyramid_base_mm": base, "pyramid_tip_mm": tip,
            "effective_medium_model": DEFAULT_MODEL, "slices": _pyramid_slices(period, base, tip, height)}


def _pyramid_slices(period: float, base: float, tip: float, height: float) -> list:
    """Return (eps_eff(eps), thickness) slices from the tip down to the base (a staircase of the taper)."""
    z = (np.arange(PYRAMID_SLICES) + 0.5) / PYRAMID_SLICES
    side = tip + (base - tip) * z
    fills = (side / period) ** 2
    return [(lambda e, f=f: effective_permittivity(f, e), height / PYRAMID_SLICES) for f in fills]


def _pyramid_height(sweep: list[Medium], period: float, base: float, tip: float) -> float:
    """Return the lowest height (steps of lambda0 / 40) keeping each face under the target across the band."""
    step = sweep[len(sweep) // 2].wavelength_mm / 40
    best, best_r = step, np.inf
    for height in step * np.arange(4, 121):
        worst = _face_worst(sweep, {"slices": _pyramid_slices(period, base, tip, height)})
        if worst <= PYRAMID_TARGET_REFLECTANCE:
            return float(height)
        if worst < best_r:
            best, best_r = float(height), worst
    return best


def _layers(medium: Medium, slices: list) -> list:
    """Return (n, thickness) of a matching layer's slices for the material at one frequency."""
    eps = complex_index(medium.eps_r, medium.tan_delta) ** 2
    return [(np.sqrt(complex(make(eps))), thickness) for make, thickness in slices]


def face_reflectance(medium: Medium, slices: list) -> float:
    """Return |r|^2 from air through the layer into the bulk material (ABCD with unequal ports, Pozar Table 4.2)."""
    n_bulk = complex_index(medium.eps_r, medium.tan_delta)
    k0 = 2 * np.pi / medium.wavelength_mm
    a, b, c, d = cascade(_layers(medium, slices), k0)
    r = (a + b * n_bulk - c - d * n_bulk) / (a + b * n_bulk + c + d * n_bulk)
    return float(abs(r) ** 2)


def _face_worst(sweep: list[Medium], layer: dict, period: float | None = None, field: str = "along") -> float:
    """Return the worst single-face reflectance over the frequencies of the sweep (grooves: rigorously)."""
    if layer.get("matching") == "grooves":
        return max(_groove_face(m, layer["fill"], layer["depth_mm"], period, field) for m in sweep)
    return max(face_reflectance(m, layer.get("slices", [])) for m in sweep)


def _band_table(band, core: float, layer: dict, period: float | None = None, field: str = "along") -> list[dict]:
    """Return transmittance and reflectance of the whole window at the band's bottom, centre and top (a window
    with grooves from the lamellar solver, every order; else from the layers' transfer matrices)."""
    rows = []
    for medium in band:
        eps = complex_index(medium.eps_r, medium.tan_delta) ** 2
        if layer.get("matching") == "grooves":
            face = lamellar.Grating(eps, layer["fill"], layer["depth_mm"])
            through = lamellar.zero_order([face, lamellar.Uniform(eps, core), face], period_mm=period,
                                          freq_ghz=medium.freq_ghz, polarisation=field)
            rows.append({"freq_ghz": medium.freq_ghz, "transmittance": through.transmittance,
                         "reflectance": through.reflectance})
            continue
        slices = layer.get("slices", [])
        stack = _layers(medium, slices) + [(complex_index(medium.eps_r, medium.tan_delta), core)]
        stack += _layers(medium, slices[::-1])
        s11, s21, _ = s_parameters(*cascade(stack, 2 * np.pi / medium.wavelength_mm))
        rows.append({"freq_ghz": medium.freq_ghz, "transmittance": float(abs(s21) ** 2),
                     "reflectance": float(abs(s11) ** 2)})
    return rows


def _window_solid(p: dict, core: float, period: float, layer: dict, printer=None):
    """Return the core with its matching layer on both faces, flat back of the lower layer on z = 0."""
    radius, depth = p["diameter_mm"] / 2, layer.get("depth_mm", 0.0)
    slab = disc(radius, core, "window", z0_mm=depth)
    if p["matching"] == "none":
        return slab
    # The texture stops short of the rim by two chord tolerances, so its cut faces never coincide
    # with the core's own rim (coincident faces leave needle triangles in a union).
    inner = radius - 2 * CHORD_TOL_MM
    if p["matching"] == "grooves":
        upper = _ridges(inner, period, layer["ridge_width_mm"], depth)
        lower = upper if printer is None else _channels(inner, period, layer["ridge_width_mm"], depth,
                                                        RIM_WALLS * smallest_printable_mm(printer))
    else:
        smallest = smallest_printable_mm(printer)
        pyramids = _pyramids_uncut(radius, period, layer)
        upper = intersect(pyramids, _whole_cells(inner - smallest, period, depth), "matching layer")
        if printer is not None:
            # The ring meets the field along the cells' borders, half a gap from the outer pyramids' feet (a ring set a
            # whole gap back left open edges in the union at some diameters; where half a gap is below the printer's
            # smallest, the outer feet may fuse to the ring, which the check reports as a caution).
            field = _whole_cells(inner - RIM_WALLS * smallest, period, depth)
            lower = union([intersect(pyramids, field, "matching layer"),
                           subtract(disc(inner, depth + SINK_MM, "window", z0_mm=-SINK_MM), field, "rim")],
                          "matching layer")
        else:
            lower = upper
    top = checked(upper.translate((0.0, 0.0, depth + core)), "matching layer")
    bottom = checked(lower.mirror((0.0, 0.0, 1.0)).translate((0.0, 0.0, depth)), "matching layer")
    return union([slab, top, bottom], "window")


def _ridges(radius: float, period: float, ridge: float, depth: float):
    """Return the upper face's grooves: ridges standing on z = 0 (sunk SINK_MM below), each a bar ended square where
    its outer edge meets the circle of ``radius``, the grooves between them open at both ends (no hollow the vat
    film could seal). A ridge cut by the circle itself would end in a sliver narrower than any printer's smallest
    feature (a wedge where the arc crosses it at a slant, a crescent at the sides). Bars shorter than they are
    wide are left out."""
    bars = [_bar(centre, ridge, half, depth + SINK_MM) for centre, half in _square_ended(radius, period, 0.0, ridge)]
    return union(bars, "grooves")


def _channels(radius: float, period: float, ridge: float, depth: float, rim: float):
    """Return the lower face's grooves for a printer: a disc of ``radius`` standing on z = 0, with each groove cut
    into it as a channel ended square at least ``rim`` inside the rim. Built first, on the plate, this face must
    carry the core above it: closed channel ends and a solid ring leave the core's underside resting on material
    all round, spanning only the channels' width (which ``_bridged`` keeps within what the printer can span).
    The ring reflects as a bare face: a cost the whole-window figures (infinite grooves) do not include."""
    gap = period - ridge
    solid = disc(radius, depth + SINK_MM, "grooves", z0_mm=-SINK_MM)
    cuts = [_bar(centre, gap, half, depth + 2 * SINK_MM) for centre, half
            in _square_ended(radius - rim, period, period / 2, gap)]
    return subtract(solid, union(cuts, "grooves"), "grooves") if cuts else solid


def _square_ended(radius: float, period: float, offset: float, width: float) -> list[tuple[float, float]]:
    """Return (centre x, half length) of each bar ``width`` wide, centred at offset + k period, whose corners lie on
    the circle of ``radius``; bars that do not fit, or would be shorter than they are wide, are left out."""
    count = int(np.ceil(radius / period)) + 1
    out = []
    for centre in offset + np.arange(-count, count + 1) * period:
        outer = abs(centre) + width / 2
        if outer >= radius:
            continue
        half = float(np.sqrt(radius**2 - outer**2))
        if 2 * half >= width:
            out.append((float(centre), half))
    return out


def _bar(centre: float, width: float, half: float, height: float):
    """Return a bar ``width`` wide (x) and 2 half long (y) from z = -SINK_MM to height - SINK_MM."""
    return m3d.Manifold.cube((width, 2 * half, height), center=True).translate((centre, 0.0, height / 2 - SINK_MM))


def _whole_cells(radius: float, period: float, depth: float):
    """Return the columns of the lattice cells (one pyramid each, centred on (i p, j p)) whose four corners lie within
    ``radius``, from SINK_MM below z = 0 to SINK_MM above ``depth``: the pyramids kept whole. Their edges run along the
    cells' borders, where the pyramids' feet leave only floor, so cutting there leaves no sliver (the rim's circle
    cut pyramids into wedges narrower than any printer's smallest feature)."""
    count = int(np.ceil(radius / period)) + 1
    sites = np.arange(-count, count + 1) * period
    x, y = np.meshgrid(sites, sites)
    far = np.hypot(np.abs(x) + period / 2, np.abs(y) + period / 2)
    squares = [m3d.CrossSection.square((period, period), center=True).translate((float(cx), float(cy)))
               for cx, cy in zip(x[far < radius], y[far < radius])]
    if not squares:
        raise UnusableInput("texture_unprintable", f"No whole {period:g} mm pyramid cell fits within the window's "
                            "rim; choose a larger window or a finer period.")
    section = m3d.CrossSection.batch_boolean(squares, m3d.OpType.Add)
    return checked(m3d.Manifold.extrude(section, depth + 2 * SINK_MM).translate((0.0, 0.0, -SINK_MM)), "pyramids")


def _pyramids_uncut(radius: float, period: float, layer: dict):
    """Return the pyramid texture standing on z = 0 (its floor reaching SINK_MM below), uncut, over the aperture."""
    base, tip, depth = layer["pyramid_base_mm"], layer["pyramid_tip_mm"], layer["depth_mm"]
    # The feet go on down the same slope half a sink into the core, so no face of the floor between them lies in the
    # core's own face (coplanar faces left open edges in the union once the rim's ring was added): at z = 0 the
    # pyramids are still ``base`` wide.
    sunk = SINK_MM / 2
    x, z = _wave(radius, period, base + (base - tip) * sunk / depth, tip, depth + sunk)
    # Two crossed trapezoid ridges intersect in square frustums: the pyramids.
    prism = extrude_xz_profile(x, z, 2 * radius + 2, "pyramids")
    return checked(intersect(prism, prism.rotate((0.0, 0.0, 90.0)), "pyramids").translate(
        (0.0, 0.0, -SINK_MM - sunk)), "pyramids")


def _wave(radius: float, period: float, base: float, tip: float, height: float) -> tuple[np.ndarray, np.ndarray]:
    """Return a trapezoid wave z(x) over [-radius - 1, radius + 1]: feet base wide, tops tip wide, on a floor at -SINK_MM."""
    count = int(np.ceil((radius + 1) / period))
    centres = (np.arange(-count, count + 1)) * period
    xs = centres[:, None] + np.array([-base, -tip, tip, base]) / 2
    zs = np.broadcast_to(np.array([0.0, height, height, 0.0]), xs.shape)
    x, z = xs.ravel(), zs.ravel()
    # Touching feet (base = period) repeat a point; the polygon must not.
    keep = np.r_[True, (np.diff(x) > 1e-12) | (np.diff(z) != 0)]
    x, z = x[keep], z[keep]
    return np.r_[x[0] - period, x, x[-1] + period], np.r_[0.0, z, 0.0] + SINK_MM
