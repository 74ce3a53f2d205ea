"""A run's void labels are kept on its window alone; read by frame pixel they are the frame's labelling."""

import numpy as np
import pytest
import scipy.ndimage

from services.layers import LayerStack
from services.rules.scan import Frame, RunView


def _views():
    """Return two runs' views: rings and a cup off-centre, so their windows differ and lie inside the frame."""
    yy, xx = np.mgrid[:90, :120]
    low = (np.hypot(yy - 40, xx - 50) < 22) & ~(np.hypot(yy - 40, xx - 50) < 6)  # a ring round a hole
    low[30:36, 80:100] = True
    high = (np.abs(yy - 55) < 12) & (np.abs(xx - 70) < 30) & ~((np.abs(yy - 55) < 4) & (np.abs(xx - 62) < 5))
    high |= (np.hypot(yy - 20, xx - 25) < 9) & ~(np.hypot(yy - 20, xx - 25) < 3)
    stack = LayerStack.from_masks([low, high], pixel_mm=0.1, layer_height_mm=0.1, origin_mm=(0.0, 0.0, 0.0))
    frame = Frame(stack, 2)
    views, below = [], None
    for index, (first, last, mask) in enumerate(stack.runs()):
        view = RunView(frame, index, first, last, frame.pad_mask(mask), below, None)
        views.append(view)
        below = view
    return views


def _frame_labels(view):
    """Return the view's void labels over the whole frame, as a plain 4-connected labelling numbers them."""
    plain, _ = scipy.ndimage.label(~view.mask)
    ours = np.full(view.mask.shape, view.void[1][0, 0], view.void[1].dtype)
    ours[view.window] = view.void[1]
    ours[view.mask] = 0
    return plain, ours


def test_void_labels_read_by_frame_pixel_match_a_labelling_of_the_whole_frame():
    """Outside its window a run's void is open air; by frame pixel, and over strided slices reaching past the
    window on every side, the labels partition the void as scipy's labelling of the whole frame does."""
    for view in _views():
        plain, ours = _frame_labels(view)
        void = ~view.mask
        pairs = np.unique(np.column_stack([plain[void], ours[void]]), axis=0)
        assert len(np.unique(pairs[:, 0])) == len(pairs) == len(np.unique(pairs[:, 1]))  # one to one
        flat = np.arange(view.mask.size)
        np.testing.assert_array_equal(np.where(void.ravel(), view.void_label_at(flat), 0), ours.ravel())
        ny, nx = view.mask.shape
        for rows, cols in ((slice(None), slice(None)), (slice(0, ny, 2), slice(2, nx, 2)), (slice(3, 41, 3), slice(7, nx - 1, 5)),
                           (slice(60, ny), slice(0, 9))):
            got = view.void_labels_over(rows, cols)
            np.testing.assert_array_equal(np.where(void[rows, cols], got, 0), ours[rows, cols])


@pytest.mark.parametrize("index", [0, 1])
def test_the_enclosed_pixels_labels_follow_the_enclosed_index(index):
    """Each enclosed pixel's label, listed in frame order, is the label at that frame pixel."""
    view = _views()[index]
    assert view.enclosed_index.size > 0
    np.testing.assert_array_equal(view.enclosed_labels, view.void_label_at(view.enclosed_index))
    assert not view.void[2][view.enclosed_labels].any()  # none of them open air


def test_pockets_counted_while_labelling_or_afterwards_are_the_same():
    """A run's pockets' pixel counts and first pixels are the same whether OpenCV counted them while labelling
    (after a run with pockets) or they were counted from the pockets' pixels afterwards; both against a plain
    count of scipy's labelling."""
    found = {}
    for counted_while_labelling in (False, True):
        for view in _views():
            view.frame.pockets_below = counted_while_labelling
            count, labels, outside = view.void
            assert (view._void_in_window[2] is not None) == counted_while_labelling
            pockets = np.flatnonzero(~outside)[1:]
            found.setdefault(view.index, []).append((view.void_area.copy(), view.void_first_pixel(pockets)))
            plain, _ = _frame_labels(view)
            first_of = {int(plain.flat[f]): f for f in view.void_first_pixel(pockets)}
            for lab, f in first_of.items():  # scipy's first pixel of that pocket, row-major
                assert np.flatnonzero(plain.ravel() == lab)[0] == f
            np.testing.assert_array_equal(np.sort(view.void_area[pockets]),
                                          np.sort([np.count_nonzero(plain == lab) for lab in first_of]))
    for (area_a, first_a), (area_b, first_b) in found.values():
        np.testing.assert_array_equal(area_a, area_b)
        np.testing.assert_array_equal(first_a, first_b)


def test_a_run_labels_its_void_with_counts_only_after_a_run_with_pockets():
    """Counting while labelling costs more on a run without pockets: it is done after a run that had some."""
    low, high = _views()
    frame = low.frame
    frame.pockets_below = False
    assert low._void_in_window[2] is None and frame.pockets_below  # the ring round a hole has a pocket
    assert high._void_in_window[2] is not None
