"""Tests for the layer stack: slicing, rasterising, dedupe, thickness map and build orientation."""

import math
from dataclasses import replace

import numpy as np
import pytest
import trimesh
from manifold3d import CrossSection, Manifold, OpType
from scipy import integrate
from stl import mesh as stl_mesh

from services import layers
from services.errors import UnusableInput
from services.layers import MARGIN_PX, LayerStack, build_layer_stack, orient_part

PX = 0.05


def stack_of(part, px=PX, dz=PX, **kwargs):
    return build_layer_stack(part, pixel_mm=px, layer_height_mm=dz, **kwargs)


def revolved(radii_mm, top_mm, segments=256):
    """Return the solid of revolution under the profile (r, top), r running from the rim to the axis."""
    outline = [(0.0, 0.0), (float(radii_mm[0]), 0.0)] + list(zip(radii_mm, top_mm))
    return CrossSection([np.array(outline)]).revolve(segments)


def hyperbolic_sag(r, n=1.65, f=72.0):
    """Return the sag of a hyperbolic plano-convex lens face: (n^2 - 1) z^2 + 2 (n - 1) f z = r^2.

    Silver, Microwave Antenna Theory and Design (1949), ch. 11; Goldsmith, Quasioptical Systems
    (1998), ch. 5; from memory.
    """
    a, b = n * n - 1, 2 * f * (n - 1)
    return (-b + np.sqrt(b * b + 4 * a * np.asarray(r, dtype=float) ** 2)) / (2 * a)


def lens_thickness(radius, base=1.0):
    """Return t(r) of a plano-convex hyperbolic lens of the given radius on a flat base."""
    return lambda r: base + hyperbolic_sag(radius) - hyperbolic_sag(r)


def zoned_thickness(depth, base=1.0):
    """Return t(r) of the zoned lens: base + depth - (sag mod depth)."""
    return lambda r: base + depth - np.mod(hyperbolic_sag(r), depth)


def zoned_profile(radius, depth, base=1.0, per_zone=80):
    """Return (r, top) of the zoned lens from rim to axis, with vertical steps at the zone radii."""
    steps = np.arange(1, int(hyperbolic_sag(radius) // depth) + 1) * depth
    zone_r = np.sqrt((1.65**2 - 1) * steps**2 + 2 * 72.0 * 0.65 * steps)  # sag(zone_r) = k * depth
    edges = np.concatenate([[0.0], zone_r, [radius]])
    r_all, t_all = [], []
    for k, (outer, inner) in enumerate(zip(edges[:0:-1], edges[-2::-1])):
        r = np.linspace(outer, inner, per_zone)
        r_all.append(r)
        t_all.append(base + depth - (hyperbolic_sag(r) - (len(edges) - 2 - k) * depth))
    return np.concatenate(r_all), np.concatenate(t_all), zone_r


def numpy_stl_volume(part, tmp_path):
    """Return the volume numpy-stl (general-purpose STL library) computes from our mesh written as STL."""
    path = tmp_path / f"{part.name}.stl"
    trimesh.Trimesh(part.vertices_mm, part.faces, process=False).export(path)
    volume, _, _ = stl_mesh.Mesh.from_file(str(path)).get_mass_properties()
    return float(volume)


def point_in_polygons(x, y, polygons):
    """Return even-odd inside flags for points, by the crossing-number test.

    Shimrat, "Algorithm 112: Position of point relative to polygon", CACM 5(8), 1962 (from memory).
    """
    inside = np.zeros(x.shape, dtype=bool)
    for poly in polygons:
        a, b = poly, np.roll(poly, -1, axis=0)
        for (xa, ya), (xb, yb) in zip(a, b):
            crosses = (ya > y) != (yb > y)
            with np.errstate(divide="ignore", invalid="ignore"):
                x_cross = xa + (y - ya) * (xb - xa) / (yb - ya)
            inside ^= crosses & (x < x_cross)
    return inside


# --- analytic solids ---------------------------------------------------------------------------

def test_box_is_exact_on_the_pixel_grid(make_part):
    """A box whose sides lie between pixel centres gives exact area, perimeter and volume."""
    part = make_part(Manifold.cube((10.0, 8.0, 2.0)).translate((1.013, -3.031, 0.0)))
    stack = stack_of(part)
    assert stack.count == 40
    assert stack.distinct_count == 1
    # analytic: 10 x 8 mm layers, 2 (10 + 8) mm boundary, 10 x 8 x 2 mm3
    np.testing.assert_allclose(stack.area_mm2, 80.0, rtol=1e-12)
    np.testing.assert_allclose(stack.perimeter_mm, 36.0, rtol=1e-12)
    assert stack.volume_mm3 == pytest.approx(160.0, rel=1e-12)
    assert stack.origin_mm[2] == 0.0


def test_grid_has_a_void_margin_and_sits_on_pixel_multiples(make_part):
    """The grid covers the xy bounds with at least two void pixels each side, corners on the pixel lattice."""
    stack = stack_of(make_part(Manifold.cube((3.0, 2.0, 0.5)).translate((0.37, 0.52, 0.0))))
    cols = np.flatnonzero(stack.footprint.any(axis=0))
    rows = np.flatnonzero(stack.footprint.any(axis=1))
    assert cols[0] >= MARGIN_PX and stack.shape[1] - 1 - cols[-1] >= MARGIN_PX
    assert rows[0] >= MARGIN_PX and stack.shape[0] - 1 - rows[-1] >= MARGIN_PX
    for origin in stack.origin_mm[:2]:
        assert origin / PX == pytest.approx(round(origin / PX), abs=1e-9)
    assert stack.x_centres_mm[cols[0]] == pytest.approx(0.375)  # first centre inside x >= 0.37
    assert stack.y_centres_mm[rows[0]] == pytest.approx(0.525)


def test_cylinder_matches_pi_r2_h(make_part):
    """A cylinder's layer stack holds pi r^2 h within 1 % and the 256-gon's area within 0.2 %."""
    r, h, n = 5.0, 3.0, 256
    part = make_part(Manifold.cylinder(h, r, circular_segments=n))
    stack = stack_of(part)
    # analytic: cylinder pi r^2 h; regular n-gon area n/2 r^2 sin(2 pi / n)
    assert stack.volume_mm3 == pytest.approx(math.pi * r * r * h, rel=0.01)
    np.testing.assert_allclose(stack.area_mm2, n / 2 * r * r * math.sin(2 * math.pi / n), rtol=0.002)
    assert part.volume_mm3 == pytest.approx(math.pi * r * r * h, rel=0.001)


def test_tube_keeps_its_hole(make_part):
    """A tube rasterises as a ring: the bore is void and each layer has the annulus's area."""
    outer, inner = 5.0, 3.0
    tube = Manifold.cylinder(2.0, outer, circular_segments=256) - Manifold.cylinder(
        2.2, inner, circular_segments=256).translate((0, 0, -0.1))
    stack = stack_of(make_part(tube))
    # analytic: annulus pi (R^2 - r^2)
    np.testing.assert_allclose(stack.area_mm2, math.pi * (outer**2 - inner**2), rtol=0.01)
    centre = (np.abs(stack.y_centres_mm).argmin(), np.abs(stack.x_centres_mm).argmin())
    assert not stack.layer(0)[centre] and not stack.footprint[centre]
    assert stack.thickness_mm[centre] == 0.0
    ring = (np.abs(stack.y_centres_mm).argmin(), np.abs(stack.x_centres_mm - 4.0).argmin())
    assert stack.thickness_mm[ring] == pytest.approx(2.0)
    # A digitised convex outline has 4-neighbour length = 2 (width + height) = 8 r per circle.
    np.testing.assert_allclose(stack.perimeter_mm, 8 * (outer + inner), atol=4 * PX)


@pytest.mark.parametrize("kind", ["plano_convex", "zoned"])
def test_revolved_lens_volume_matches_the_profile_integral(make_part, kind):
    """A revolved lens's stack and mesh volumes agree with the integral of its profile within 1 %."""
    radius = 12.0
    if kind == "plano_convex":
        r = np.linspace(radius, 0.0, 300)
        t_of, breaks = lens_thickness(radius), []
        top = t_of(r)
    else:
        depth = 0.5
        r, top, breaks = zoned_profile(radius, depth)
        t_of = zoned_thickness(depth)
    part = make_part(revolved(r, top))
    stack = stack_of(part)
    # computed: V = integral of 2 pi r t(r) dr (scipy.integrate.quad, split at the zone steps)
    exact, _ = integrate.quad(lambda s: 2 * math.pi * s * t_of(s), 0.0, radius, points=list(breaks), limit=200)
    assert stack.volume_mm3 == pytest.approx(exact, rel=0.01)
    assert part.volume_mm3 == pytest.approx(exact, rel=0.005)


def test_thickness_map_follows_the_lens_profile_within_half_a_layer(make_part):
    """The column-sum thickness map is within half a layer of the lens thickness at every pixel."""
    radius, dz = 8.0, 0.04
    r = np.linspace(radius, 0.0, 400)
    t_of = lens_thickness(radius, base=0.5)
    stack = stack_of(make_part(revolved(r, t_of(r), segments=512)), px=0.1, dz=dz)
    rho = np.hypot(*np.meshgrid(stack.x_centres_mm, stack.y_centres_mm))
    well_inside = rho < radius - 0.1  # skip the rim, where the 512-gon is inside the circle
    err = np.abs(stack.thickness_mm[well_inside] - t_of(rho[well_inside]))
    assert err.max() <= dz / 2 + 1e-3  # column sum of mid-plane samples: error <= dz / 2 (computed)
    assert not stack.footprint[rho > radius + 0.1].any()


def test_volumes_agree_with_numpy_stl(make_part, tmp_path):
    """Stack and mesh volumes agree with numpy-stl's volume of the same mesh read from an STL file."""
    r = np.linspace(10.0, 0.0, 100)
    lens = revolved(r, lens_thickness(10.0)(r), segments=128)  # small: numpy-stl checks closure exactly
    tube = Manifold.cylinder(3.0, 4.0, circular_segments=128) - Manifold.cylinder(
        3.2, 2.0, circular_segments=128).translate((0, 0, -0.1))
    for name, shape in (("lens", lens), ("tube", tube)):
        part = make_part(shape, name=name)
        reference = numpy_stl_volume(part, tmp_path)  # numpy-stl, general-purpose STL library
        assert part.volume_mm3 == pytest.approx(reference, rel=1e-4)  # STL stores float32
        assert stack_of(part).volume_mm3 == pytest.approx(reference, rel=0.01)


def demo_zoned_lens():
    """Return the 60 mm, f = 72 mm zoned lens for 140 GHz (n = 1.65) on a 2 mm base."""
    depth = 299.792458 / 140.0 / 0.65  # full-wave zone step lambda / (n - 1), shared optics notes section 8
    r, top, _ = zoned_profile(30.0, depth, base=2.0, per_zone=120)
    return revolved(r, top)


def demo_pillar_plate():
    """Return the 30 mm plate with ~3,000 pillars graded in radius and height (as in benchmarks/)."""
    xs, ys = np.meshgrid(np.arange(-30, 31) * 0.47, np.arange(-30, 31) * 0.47)
    rho = np.hypot(xs, ys)
    keep = rho <= 14.5
    pillars = [
        Manifold.cylinder(3.1 - 2.0 * p / 14.5, 0.18 - 0.10 * (p / 14.5) ** 2, circular_segments=32)
        .translate((x, y, 0.9)) for x, y, p in zip(xs[keep], ys[keep], rho[keep])
    ]
    return Manifold.batch_boolean([Manifold.cylinder(1.0, 15.0, circular_segments=256)] + pillars, OpType.Add)


@pytest.mark.slow
@pytest.mark.parametrize("build", [demo_zoned_lens, demo_pillar_plate])
def test_demo_parts_agree_with_numpy_stl_at_50_um(make_part, tmp_path, build):
    """The demo parts' layer stacks hold numpy-stl's volume within 1 % at 50 um."""
    part = make_part(build(), name=build.__name__)
    reference = numpy_stl_volume(part, tmp_path)  # numpy-stl, general-purpose STL library
    assert stack_of(part).volume_mm3 == pytest.approx(reference, rel=0.01)


def test_lens_profile_matches_the_worked_sag():
    """The profile used for the reference integrals reproduces the notes' worked hyperbolic sag."""
    # shared optics notes section 8 [C]: n = 1.67332, f = 100 mm, y = 50 mm -> z = 15.39625 mm
    assert hyperbolic_sag(50.0, n=1.67332, f=100.0) == pytest.approx(15.39625, abs=1e-5)


# --- rasterising -------------------------------------------------------------------------------

def test_layers_match_an_independent_point_in_polygon_test(make_part):
    """Every pixel of sampled layers matches a crossing-number test on manifold3d's exact slices."""
    xs, ys = np.meshgrid(np.arange(-3, 4) * 0.9, np.arange(-3, 4) * 0.9)
    pillars = [
        Manifold.cylinder(1.1 + 0.1 * i, 0.25 + 0.02 * (i % 5), circular_segments=24).translate((x, y, 0.9))
        for i, (x, y) in enumerate(zip(xs.ravel(), ys.ravel()))
    ]
    ring = Manifold.cylinder(1.0, 4.0, circular_segments=96) - Manifold.cylinder(
        1.2, 1.0, circular_segments=96).translate((0, 0, -0.1))
    solid = Manifold.batch_boolean([ring] + pillars, OpType.Add)
    stack = stack_of(make_part(solid), px=0.04, dz=0.05)
    gx, gy = np.meshgrid(stack.x_centres_mm, stack.y_centres_mm)
    for k in (0, 19, 21, 30, 45, stack.count - 1):
        polygons = solid.slice(float(stack.z_centres_mm[k])).to_polygons()
        expected = point_in_polygons(gx, gy, polygons)
        assert np.array_equal(stack.layer(k), expected), f"layer {k}"


def test_overlapping_shells_count_once(make_part):
    """Two overlapping boxes left un-unioned in one mesh give the union's area (non-zero winding)."""
    a = trimesh.creation.box(extents=(4.0, 4.0, 1.0))
    b = trimesh.creation.box(extents=(4.0, 4.0, 1.0))
    b.apply_translation((2.0, 2.0, 0.0))
    both = trimesh.util.concatenate([a, b])
    both.apply_translation((0.0, 0.0, 0.5))
    stack = stack_of(make_part(both))
    np.testing.assert_allclose(stack.area_mm2, 16.0 + 16.0 - 4.0, rtol=1e-12)  # union of two squares


@pytest.mark.parametrize("offset_mm", [0.0, 0.013, 0.031, 0.049])
def test_a_100_um_fin_is_two_pixels_wide_at_50_um(make_part, offset_mm):
    """Pixel-centre sampling puts a 0.10 mm fin at 2 px at 50 um, wherever it sits on the grid."""
    fin = Manifold.cube((0.10, 4.0, 1.0)).translate((offset_mm, 0.0, 0.0))
    stack = stack_of(make_part(fin))
    widths = stack.layer(0).sum(axis=1)
    widths = widths[widths > 0]
    assert len(widths) == 80  # 4 mm / 50 um rows
    assert np.all(widths == 2)  # 0.10 mm / 0.05 mm: within one pixel of the truth, here exact


def test_layer_count_follows_the_mid_planes(make_part):
    """A layer exists when its mid-plane cuts the part; a part under half a layer leaves one empty layer."""
    counts = {h: stack_of(make_part(Manifold.cube((1.0, 1.0, h)))).count for h in (0.06, 0.08, 0.5)}
    assert counts == {0.06: 1, 0.08: 2, 0.5: 10}
    film = stack_of(make_part(Manifold.cube((1.0, 1.0, 0.02))))
    assert film.count == 1 and film.volume_mm3 == 0.0 and not film.footprint.any()


# --- dedupe and storage ------------------------------------------------------------------------

def test_stepped_part_collapses_to_one_raster_per_step(make_part):
    """A three-step part stores three rasters, and runs() gives them bottom-up with their layers."""
    steps = Manifold.batch_boolean([
        Manifold.cube((10.0, 10.0, 1.0), center=True).translate((0, 0, 0.5)),
        Manifold.cube((6.0, 6.0, 1.1), center=True).translate((0, 0, 1.45)),  # overlaps the step below
        Manifold.cube((2.0, 2.0, 1.1), center=True).translate((0, 0, 2.45)),
    ], OpType.Add)
    stack = stack_of(make_part(steps))
    assert stack.count == 60 and stack.distinct_count == 3
    runs = list(stack.runs())
    assert [(first, last) for first, last, _ in runs] == [(0, 19), (20, 39), (40, 59)]
    assert [mask.sum() * PX * PX for _, _, mask in runs] == pytest.approx([100.0, 36.0, 4.0])
    for first, last, mask in runs:
        assert np.array_equal(stack.layer(first), mask) and np.array_equal(stack.layer(last), mask)


@pytest.mark.parametrize("dz,plate_mm", [(0.2, 0.5), (0.25, 0.375), (0.125, 0.5625)])
def test_a_flat_face_on_a_mid_plane_is_not_copied_up_the_stack(make_part, dz, plate_mm):
    """A plate under a 1 mm post: above the plate every layer is the post alone (1 mm2).

    The plate's top lies exactly on a mid-plane (all three values exact in binary). Reference: manifold3d's own
    ``Manifold.slice`` at each mid-plane, for every layer but the one the face lies on (there the face
    belongs to the solid below it in our slicer, z_lo < h <= z_hi, and to the solid above in manifold3d's).
    """
    shape = Manifold.cube((4.0, 4.0, plate_mm)) + Manifold.cube((1.0, 1.0, 1.5)).translate((1.5, 1.5, 0.0))
    stack = stack_of(make_part(shape), px=0.1, dz=dz)
    expected = [shape.slice(float(z)).area() for z in stack.z_centres_mm]
    on_face = stack.z_centres_mm == plate_mm
    assert on_face.sum() == 1
    assert stack.area_mm2[~on_face] == pytest.approx(np.array(expected)[~on_face], abs=1e-9)
    assert stack.area_mm2[on_face] == pytest.approx([16.0] * int(on_face.sum()))
    assert stack.distinct_count == 2


def test_float32_walls_are_vertical_for_dedupe(make_part):
    """Walls tilted by float32 rounding do not mark layers as changed, so slicing is skipped."""
    part = make_part(Manifold.cylinder(3.0, 2.0, circular_segments=32).translate((13.7, 21.3, 0.0)))
    # Top-ring vertices one float32 step off the bottom ones, as when a boolean computes them on
    # another path: the walls tilt by ~1e-7 (bench section 4, near-vertical float32 faces).
    v = part.vertices_mm.astype(np.float32)
    top = v[:, 2] == v[:, 2].max()
    v[top, :2] = np.nextafter(v[top, :2], np.float32(np.inf))
    part = replace(part, vertices_mm=v.astype(np.float64))
    tris = part.triangles_mm
    heights = (np.arange(60) + 0.5) * PX
    slicer = layers._Slicer(tris, heights)
    strict = slicer.changed_layers(tris[:, :, 2].ravel(), tol_mm=0.0)
    tolerant = slicer.changed_layers(tris[:, :, 2].ravel(), tol_mm=1e-3 * PX)
    assert strict.sum() > 1  # the rounding really does tilt some walls
    assert np.flatnonzero(tolerant).tolist() == [0]
    assert stack_of(part).distinct_count == 1


def test_thickness_map_of_a_step_wedge(make_part):
    """Each band of a step wedge has its step height in the thickness map; the map holds the volume."""
    heights = (0.5, 1.0, 1.5, 2.0)
    wedge = Manifold.batch_boolean(
        [Manifold.cube((2.0, 5.0, h)).translate((2.0 * i, 0.0, 0.0)) for i, h in enumerate(heights)], OpType.Add)
    stack = stack_of(make_part(wedge))
    row = np.abs(stack.y_centres_mm - 2.5).argmin()
    for i, h in enumerate(heights):
        col = np.abs(stack.x_centres_mm - (2.0 * i + 1.0)).argmin()
        assert stack.thickness_mm[row, col] == pytest.approx(h, rel=1e-6)
    assert stack.thickness_mm.dtype == np.float32
    assert stack.distinct_count == len(heights)
    # analytic: 2 x 5 mm bands of the four heights
    assert stack.volume_mm3 == pytest.approx(10.0 * sum(heights), rel=1e-9)
    assert stack.thickness_mm.sum(dtype=np.float64) * PX * PX == pytest.approx(stack.volume_mm3, rel=1e-6)


def test_from_masks_round_trips(seed=7):
    """from_masks keeps every layer, shares consecutive repeats and measures area and perimeter."""
    rng = np.random.default_rng(seed)
    a, b = rng.random((13, 21)) < 0.4, rng.random((13, 21)) < 0.4
    single = np.zeros((13, 21), dtype=bool)
    single[6, 10] = True
    rect = np.zeros((13, 21), dtype=bool)
    rect[2:4, 5:8] = True
    masks = [a, a, b, single, rect, rect, rect, a]
    stack = LayerStack.from_masks(masks, pixel_mm=0.1, layer_height_mm=0.2, origin_mm=(1.0, 2.0, 0.0))
    assert stack.count == 8 and stack.distinct_count == 5  # only consecutive repeats are shared
    for k, mask in enumerate(masks):
        assert np.array_equal(stack.layer(k), mask)
    assert [(f, last) for f, last, _ in stack.runs()] == [(0, 1), (2, 2), (3, 3), (4, 6), (7, 7)]
    np.testing.assert_allclose(stack.area_mm2, [m.sum() * 0.01 for m in masks])
    assert stack.perimeter_mm[3] == pytest.approx(4 * 0.1)   # one pixel: 4 sides
    assert stack.perimeter_mm[4] == pytest.approx(10 * 0.1)  # 2 x 3 pixels: 2 (2 + 3) sides
    np.testing.assert_allclose(stack.thickness_mm, np.sum(masks, axis=0) * 0.2, rtol=1e-6)
    assert np.array_equal(stack.footprint, np.logical_or.reduce(masks))
    assert stack.x_centres_mm[0] == pytest.approx(1.05) and stack.z_centres_mm[-1] == pytest.approx(1.5)
    assert stack.layer(-1).sum() == a.sum()
    with pytest.raises(IndexError):
        stack.layer(8)


def perimeter_px(mask):
    """Return the 4-neighbour solid/void pairs of a mask padded with void (our definition, counted directly)."""
    padded = np.pad(mask, 1)
    return np.count_nonzero(padded[1:] != padded[:-1]) + np.count_nonzero(padded[:, 1:] != padded[:, :-1])


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_from_masks_of_slowly_changing_layers_measures_every_layer(seed):
    """Layers that change by a few pixels (stored as boxes, counted sparsely) keep every measure exact."""
    rng = np.random.default_rng(seed)
    mask = np.zeros((40, 56), dtype=bool)
    mask[5:30, 9:50] = True
    masks = []
    for _ in range(30):
        if rng.random() < 0.7:  # a few pixels flip; otherwise the layer repeats
            rows, cols = rng.integers(0, 40, 6), rng.integers(0, 56, 6)
            mask = mask.copy()
            mask[rows, cols] ^= True
        masks.append(mask)
    masks += [np.zeros_like(mask), masks[0]]  # an empty layer between, then a dense change back
    stack = LayerStack.from_masks(masks, pixel_mm=0.05, layer_height_mm=0.025)
    for k, m in enumerate(masks):
        assert np.array_equal(stack.layer(k), m)
        assert stack.area_mm2[k] == pytest.approx(m.sum() * 0.0025)
        assert stack.perimeter_mm[k] == pytest.approx(perimeter_px(m) * 0.05)
    np.testing.assert_allclose(stack.thickness_mm, np.sum(masks, axis=0) * 0.025, rtol=1e-6)


def test_prefix_inside_the_crossing_box_equals_a_full_cumulative_sum():
    """Summing only inside the crossings' box, and carrying an open winding up, equals a full cumsum."""
    rng = np.random.default_rng(5)
    acc = np.zeros((3, 31, 20), dtype=np.int8)
    acc[:, 4:21, 6:15] = rng.integers(-1, 2, (3, 17, 9))
    expected = np.cumsum(acc, axis=1, dtype=np.int8)
    layers._prefix_rows(acc, 4, 20, 6, 15)
    assert expected[:, -1].any()  # some columns stay open: the carry-up is exercised
    assert np.array_equal(acc, expected)


@pytest.mark.parametrize("shape", [(17, 19), (9, 16), (1, 8), (5, 1)])
def test_random_perimeter_counts_4_neighbour_transitions(shape):
    """Perimeter is the number of solid/void 4-neighbour pairs times the pixel, outside the grid void."""
    mask = np.random.default_rng(3).random(shape) < 0.5
    stack = LayerStack.from_masks([mask], pixel_mm=0.025, layer_height_mm=0.025)
    assert stack.perimeter_mm[0] == pytest.approx(perimeter_px(mask) * 0.025)


def test_a_60_mm_disk_at_25_um_is_stored_in_a_few_megabytes(make_part):
    """A 60 mm disk at 25 um / 25 um keeps one packed raster: far below 2 GB, and below the bool stack."""
    disk = make_part(Manifold.cylinder(3.0, 30.0, circular_segments=256))
    stack = stack_of(disk, px=0.025, dz=0.025)
    ny, nx = stack.shape
    assert stack.count == 120 and stack.distinct_count == 1
    assert stack.nbytes <= ny * math.ceil(nx / 8) + 16 * stack.count
    assert stack.nbytes < 2**30 / 1000
    assert stack.nbytes * 100 < stack.count * ny * nx  # against one bool byte per voxel
    assert stack.volume_mm3 == pytest.approx(math.pi * 900 * 3.0, rel=0.01)


def test_summary(make_part):
    """summary() gives the report's layers section."""
    stack = stack_of(make_part(Manifold.cube((1.0, 2.0, 0.5))))
    assert stack.summary() == {
        "count": 10, "layer_height_mm": PX, "pixel_mm": PX, "shape": [44, 24], "distinct": 1,
        "volume_mm3": 1.0,
    }


# --- chunking and progress ---------------------------------------------------------------------

def test_small_chunks_give_the_same_stack_and_bounded_progress(make_part, monkeypatch):
    """Cutting the work into tiny chunks changes nothing, and progress is reported a few dozen times."""
    cone = make_part(Manifold.cylinder(5.0, 3.0, 0.5, circular_segments=64))
    whole = stack_of(cone)
    monkeypatch.setattr(layers, "_MAX_PAIRS", 50)
    calls = []
    chunked = stack_of(cone, progress=calls.append)
    assert chunked.count == whole.count == 100 and chunked.distinct_count == 100
    assert all(np.array_equal(chunked.layer(k), whole.layer(k)) for k in range(whole.count))
    assert 1 < len(calls) <= 34
    assert calls == sorted(calls) and calls[-1] == 1.0


# --- errors and orientation --------------------------------------------------------------------

def test_it_refuses_a_part_off_the_build_plate(make_part):
    """A part not resting on z = 0 is refused with a hint to orient it."""
    part = make_part(Manifold.cube((1.0, 1.0, 1.0)).translate((0, 0, 0.5)))
    with pytest.raises(UnusableInput) as err:
        stack_of(part)
    assert err.value.code == "not_oriented" and "orient" in err.value.message


@pytest.mark.parametrize("pixel_mm", [0.0, -0.05, float("nan"), float("inf")])
def test_it_refuses_a_bad_grid(make_part, pixel_mm):
    """A pixel that is not a positive finite size is refused."""
    with pytest.raises(UnusableInput) as err:
        build_layer_stack(make_part(Manifold.cube((1.0, 1.0, 1.0))), pixel_mm=pixel_mm, layer_height_mm=0.05)
    assert err.value.code == "bad_grid"


def test_it_refuses_a_grid_too_large_to_hold(make_part):
    """A grid beyond the per-layer pixel limit is refused, naming the part."""
    part = make_part(Manifold.cube((1000.0, 1000.0, 1.0)))
    with pytest.raises(UnusableInput) as err:
        build_layer_stack(part, pixel_mm=0.01, layer_height_mm=0.05)
    assert err.value.code == "grid_too_large" and "test" in err.value.message


# Axis picked as build direction -> (new bbox, which original coordinate becomes z, its sign).
ORIENTED = {
    "+z": ((2.0, 3.0, 5.0), 2, 1), "-z": ((2.0, 3.0, 5.0), 2, -1),
    "+x": ((5.0, 3.0, 2.0), 0, 1), "-x": ((5.0, 3.0, 2.0), 0, -1),
    "+y": ((2.0, 5.0, 3.0), 1, 1), "-y": ((2.0, 5.0, 3.0), 1, -1),
}


@pytest.mark.parametrize("orientation", sorted(ORIENTED))
def test_orient_part_puts_the_chosen_axis_up(make_part, orientation):
    """Orienting permutes the bbox, rests the part on z = 0 and keeps the winding (a rotation, not a mirror)."""
    part = make_part(Manifold.cube((2.0, 3.0, 5.0)).translate((1.0, 2.0, 3.0)))
    oriented = orient_part(part, orientation)
    bbox, axis, sign = ORIENTED[orientation]
    assert oriented.bbox_mm == pytest.approx(bbox)
    assert oriented.bounds_mm[0, 2] == 0.0
    height = sign * part.vertices_mm[:, axis]
    np.testing.assert_allclose(oriented.vertices_mm[:, 2], height - height.min())
    assert np.array_equal(oriented.faces, part.faces)
    # trimesh (general-purpose mesh library): the signed volume stays +30 mm3 only under a rotation
    assert trimesh.Trimesh(oriented.vertices_mm, oriented.faces, process=False).volume == pytest.approx(30.0)
    assert stack_of(oriented, px=0.1, dz=0.1).volume_mm3 == pytest.approx(30.0, rel=1e-9)
    assert oriented.name == part.name and oriented.volume_mm3 == part.volume_mm3


def test_orient_part_keeps_x_and_y_for_plus_z(make_part):
    """The file's own +z only moves the part down onto the plate, and the original is untouched."""
    part = make_part(Manifold.cube((2.0, 3.0, 5.0)).translate((1.0, 2.0, 3.0)))
    oriented = orient_part(part, "+z")
    np.testing.assert_array_equal(oriented.vertices_mm[:, :2], part.vertices_mm[:, :2])
    assert part.bounds_mm[0, 2] == 3.0  # the original is untouched


def test_orient_part_refuses_an_unknown_axis(make_part):
    """An axis name outside +z -z +x -x +y -y is refused."""
    with pytest.raises(UnusableInput) as err:
        orient_part(make_part(Manifold.cube((1.0, 1.0, 1.0))), "up")
    assert err.value.code == "bad_orientation"


def test_run_box_px_is_each_runs_unpacked_box_without_unpacking():
    """The areas read from the stored boxes equal those of the boxes unpacked, run by run (empty layers included,
    and a box that starts mid-frame and reaches the frame's right edge, where packing rounds up to a byte)."""
    frame = np.zeros((40, 61), bool)
    wide, edge, dot = frame.copy(), frame.copy(), frame.copy()
    wide[5:30, 3:50] = True
    edge[10:12, 45:61] = True
    dot[20, 20] = True
    stack = LayerStack.from_masks([wide, wide, frame, edge, dot, dot, frame], pixel_mm=0.1, layer_height_mm=0.1)
    unpacked = [box.shape[0] * box.shape[1] for _, _, _, box in stack.run_boxes()]
    assert stack.run_box_px().tolist() == unpacked and len(unpacked) == 5


def test_layers_turned_or_mirrored_in_the_plane_are_recognised_and_named():
    """Each of the eight turns of the square, made with numpy's own rot90 / flip (not the project's table), is
    found and named; one pixel changed in one layer, one layer more, or another grid, and the stacks differ."""
    rng = np.random.default_rng(7)
    masks = [rng.random((9, 13)) < 0.4 for _ in range(3)]
    masks.insert(1, masks[0])  # a run of two identical layers
    a = LayerStack.from_masks(masks, pixel_mm=0.05, layer_height_mm=0.05)
    made_by_numpy = {
        "as they are": lambda m: m, "mirrored across x": lambda m: np.flip(m, 0),
        "mirrored across y": lambda m: np.flip(m, 1), "turned half a turn": lambda m: np.rot90(m, 2),
        "mirrored across the diagonal": np.transpose, "mirrored across the other diagonal": lambda m: np.rot90(m, 2).T,
        "turned a quarter": np.rot90, "turned three quarters": lambda m: np.rot90(m, 3),
    }
    for name, turn in made_by_numpy.items():
        b = LayerStack.from_masks([turn(m) for m in masks], pixel_mm=0.05, layer_height_mm=0.05)
        assert layers.same_layers_turned(a, b) == name
    changed = [m.copy() for m in masks]
    changed[2][4, 6] = ~changed[2][4, 6]
    assert layers.same_layers_turned(a, LayerStack.from_masks(changed, pixel_mm=0.05, layer_height_mm=0.05)) is None
    taller = LayerStack.from_masks([*masks, masks[-1]], pixel_mm=0.05, layer_height_mm=0.05)
    assert layers.same_layers_turned(a, taller) is None
    assert layers.same_layers_turned(a, LayerStack.from_masks(masks, pixel_mm=0.1, layer_height_mm=0.05)) is None
    # The same layers in another order are other layers: the stack is not turned over by a turn in the plane.
    assert layers.same_layers_turned(a, LayerStack.from_masks(masks[::-1], pixel_mm=0.05, layer_height_mm=0.05)) is None


def test_a_turns_extent_is_the_turned_parts_without_turning_it(make_part):
    """Each orientation's extent read from the part's own (permuted) equals the extent of the part turned."""
    box = trimesh.creation.box(extents=(7.0, 3.0, 1.5))
    part = make_part(box, name="box.stl")
    for orientation in ("+z", "-z", "+x", "-x", "+y", "-y"):
        assert np.allclose(layers.oriented_extent_mm(part, orientation), orient_part(part, orientation).bbox_mm)


def _stack_digest(stack) -> tuple:
    """Everything a stack holds, layer by layer (rasters unpacked, so the storage's numbering does not count)."""
    return (stack.count, stack.shape, stack.origin_mm, stack.area_mm2.tobytes(), stack.perimeter_mm.tobytes(),
            stack.thickness_mm.tobytes(), tuple(stack.layer(k).tobytes() for k in range(stack.count)),
            [run[:2] for run in stack._spans()])


@pytest.mark.parametrize("pixel_mm", [0.05, 0.1])
def test_a_part_turned_over_reads_its_own_layers_reversed_and_mirrored(make_part, pixel_mm):
    """A part 2 mm tall (a whole number of layers) with a stepped, off-centre, holed shape: its stack turned over
    from its own equals, bit for bit, the stack of the part turned over and sliced again; turned over twice it is
    its own; a part 1.93 mm tall (not whole layers) is not read this way."""
    base = trimesh.creation.box(extents=(6.0, 4.0, 1.0))
    base.apply_translation((0.4, 0.7, 0.5))
    step = trimesh.creation.box(extents=(2.0, 1.5, 1.0))
    step.apply_translation((1.1, 1.3, 1.5))
    hole = trimesh.creation.cylinder(radius=0.6, height=3.0, sections=24)
    hole.apply_translation((-1.2, 0.2, 1.0))
    solid = trimesh.boolean.difference([trimesh.boolean.union([base, step], engine="manifold"), hole],
                                       engine="manifold")
    part = make_part(solid, name="stepped.stl")
    up, down = orient_part(part, "+z"), orient_part(part, "-z")
    own = build_layer_stack(up, pixel_mm=pixel_mm, layer_height_mm=0.05)
    turned = layers.turned_over(own, up)
    assert turned is not None
    assert _stack_digest(turned) == _stack_digest(build_layer_stack(down, pixel_mm=pixel_mm, layer_height_mm=0.05))
    assert _stack_digest(layers.turned_over(turned, down)) == _stack_digest(own)
    shorter = make_part(trimesh.creation.box(extents=(6.0, 4.0, 1.93)), name="short.stl")
    short_up = orient_part(shorter, "+z")
    assert layers.turned_over(build_layer_stack(short_up, pixel_mm=pixel_mm, layer_height_mm=0.05), short_up) is None


@pytest.mark.parametrize("orientation", ["+z", "+x"])
def test_triangles_between_pixel_columns_are_left_out_of_the_slicing(make_part, monkeypatch, orientation):
    """A triangle that lies between two pixel-centre columns adds no winding anywhere: the slicer leaves it out
    (most facets of thin pillars, here 24-sided ones 0.09 mm across at a 0.05 mm pixel, some placed with a facet
    corner on a column), and the stack is the same, bit for bit, as the one sliced with every triangle."""
    posts = [Manifold.cylinder(0.3 + 0.07 * k, 0.045, circular_segments=24).translate(
        (0.1375 * k + (0.025 if k % 3 == 0 else 0.0), 0.093 * (k % 5), 0.0)) for k in range(12)]
    plate = Manifold.cube((2.0, 0.8, 0.1)).translate((-0.2, -0.2, 0.0))
    part = orient_part(make_part(Manifold.batch_boolean([plate, *posts], OpType.Add)), orientation)
    real, kept = layers._crossing, []

    def counted(tris, heights, lo, hi, grid):
        kept.append((len(real(tris, heights, lo, hi, grid)[0]), len(real(tris, heights, lo, hi, None)[0])))
        return real(tris, heights, lo, hi, grid)

    monkeypatch.setattr(layers, "_crossing", counted)
    pruned = build_layer_stack(part, pixel_mm=PX, layer_height_mm=PX)
    monkeypatch.setattr(layers, "_crossing", lambda tris, heights, lo, hi, grid: real(tris, heights, lo, hi, None))
    every = build_layer_stack(part, pixel_mm=PX, layer_height_mm=PX)
    assert _stack_digest(pruned) == _stack_digest(every)
    assert sum(k for k, _ in kept) < 0.8 * sum(n for _, n in kept)  # facets really were left out


def test_a_slicing_thread_that_cannot_start_is_a_memory_error(make_part, monkeypatch):
    """Past the memory bound a helper thread's stack cannot be mapped: the slicing fails as out of memory (the
    check then ends with the memory limit's sentence), not as an internal error."""
    class Full:
        def submit(self, *args):
            raise RuntimeError("can't start new thread")

    monkeypatch.setattr(layers, "_helper_threads", Full)
    with pytest.raises(MemoryError):
        stack_of(make_part(Manifold.cube((30.0, 20.0, 2.0))))


def _sliced_volume_in_child(part, out) -> None:
    out.put(stack_of(part).volume_mm3)


def test_a_forked_child_slices_with_helper_threads_of_its_own(make_part):
    """A worker child forked after its parent sliced does not wait on the parent's helper threads, which do not
    exist in the child."""
    import multiprocessing

    part = make_part(Manifold.cube((30.0, 20.0, 2.0)))
    layers.prepare_helpers()
    context = multiprocessing.get_context("fork")
    out = context.Queue()
    child = context.Process(target=_sliced_volume_in_child, args=(part, out))
    child.start()
    try:
        assert out.get(timeout=60) == pytest.approx(stack_of(part).volume_mm3)
    finally:
        child.join(timeout=10)
        if child.is_alive():
            child.kill()


@pytest.mark.parametrize("size", [0, 1, 7, 8, 9, 63, 1000, 4097])
@pytest.mark.parametrize("density", [0.0, 0.01, 0.5, 1.0])
def test_the_non_zero_bytes_are_numpys_flatnonzero(size, density):
    """The non-zero bytes found word by word are np.flatnonzero's, in its order: sizes not a whole number of 8-byte
    words (the tail read byte by byte), empty, sparse and full arrays, one byte of a word set or all eight."""
    rng = np.random.default_rng(size * 7 + int(density * 100))
    a = ((rng.random(size) < density) * rng.integers(1, 256, size)).astype(np.uint8)
    np.testing.assert_array_equal(layers.nonzero_bytes(a), np.flatnonzero(a))
    np.testing.assert_array_equal(layers.nonzero_bytes(a.reshape(1, -1)), np.flatnonzero(a))
