"""PNG figures of the optics section, drawn with matplotlib's Agg backend (no display needed)."""

from __future__ import annotations

import io
from functools import wraps

import numpy as np

# Text sized to be read where the page shows the figure (about 600-800 px wide), not at 8 pt in a 900 px image.
STYLE = {"font.size": 11, "axes.titlesize": 11, "axes.labelsize": 11, "legend.fontsize": 10,
         "xtick.labelsize": 10, "ytick.labelsize": 10}


def _styled(draw):
    """Draw under the figures' text sizes (an rc context: no global state is left changed)."""
    @wraps(draw)
    def drawn(*args, **kwargs):
        import matplotlib

        with matplotlib.rc_context(STYLE):
            return draw(*args, **kwargs)
    return drawn


def _figure(width_in: float = 6.0, height_in: float = 3.4):
    from matplotlib.figure import Figure  # Figure objects use Agg directly, with no global pyplot state

    return Figure(figsize=(width_in, height_in), dpi=130, layout="constrained")


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


@_styled
def loss_png(freqs_ghz, absorption_db, reflection_db, spillover_db, designed_total_db) -> bytes:
    """Return the insertion loss against frequency as printed, its parts, and the as-designed loss, as lines."""
    fig = _figure(7.0, 3.4)
    ax = fig.add_subplot()
    f = np.asarray(freqs_ghz, dtype=float)
    order = np.argsort(f)
    parts = [np.asarray(v, dtype=float)[order] for v in (absorption_db, reflection_db, spillover_db)]
    f = f[order]
    ax.plot(f, sum(parts), "o-", color="#172030", lw=2.2, label="insertion loss, as printed")
    ax.plot(f, np.asarray(designed_total_db, dtype=float)[order], "s--", color="#545c6b",
            label="as designed (absorption + reflection)")
    for values, label, colour, marker in ((parts[0], "absorption", "#2f6f8f", "^"), (parts[1], "reflection", "#4d9a5a", "v"),
                                          (parts[2], "spillover", "#b07d12", "d")):
        ax.plot(f, values, marker=marker, ls="-", lw=1.2, color=colour, label=label)
    if len(f) == 1:
        ax.set_xlim(f[0] * 0.9, f[0] * 1.1)
    ax.set_ylim(bottom=0)
    ax.set_xlabel("frequency (GHz)")
    ax.set_ylabel("loss (dB)")
    ax.set_title("Loss through the printed part")
    ax.grid(alpha=0.3)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return _png(fig)


@_styled
def fwhm_png(freqs_ghz, fwhm_mm, dl_fwhm_mm) -> bytes:
    """Return the spot FWHM (x and y) against frequency, with the diffraction limit."""
    fig = _figure()
    ax = fig.add_subplot()
    fwhm, dl = np.asarray(fwhm_mm), np.asarray(dl_fwhm_mm)
    ax.plot(freqs_ghz, fwhm[:, 0], "o-", label="FWHM x, as printed")
    ax.plot(freqs_ghz, fwhm[:, 1], "s--", label="FWHM y, as printed")
    ax.plot(freqs_ghz, dl.mean(axis=1), "k:", label="diffraction limit")
    ax.set_xlabel("frequency (GHz)")
    ax.set_ylabel("spot FWHM (mm)")
    ax.legend()
    return _png(fig)


@_styled
def focal_plane_png(intensity, ideal_intensity, cell_mm: float, peak, freq_ghz: float, distance_mm: float) -> bytes:
    """Return the focal-plane intensity map and an x cut through the peak with the diffraction-limited curve."""
    fig = _figure(9.0, 3.8)
    ax_map, ax_cut = fig.subplots(1, 2)
    norm = ideal_intensity.max()
    half = max(8, min(intensity.shape) // 6)
    r0, c0 = peak
    win = intensity[max(0, r0 - half):r0 + half + 1, max(0, c0 - half):c0 + half + 1] / norm
    extent = np.array([-1, 1, -1, 1]) * half * cell_mm
    im = ax_map.imshow(win, origin="lower", extent=extent, cmap="magma")
    fig.colorbar(im, ax=ax_map, label="intensity / ideal peak")
    ax_map.set_xlabel("x (mm)")
    ax_map.set_ylabel("y (mm)")
    ax_map.set_title(f"{freq_ghz:g} GHz, {distance_mm:.1f} mm from the far extreme")
    x = (np.arange(intensity.shape[1]) - c0) * cell_mm
    # The field is computed on the analysis grid (a few samples across a sharp spot): the dots are those
    # samples, the line a cubic spline through them for the eye.
    from scipy.interpolate import CubicSpline

    fine = np.linspace(x[0], x[-1], 8 * len(x))
    ax_cut.plot(fine, CubicSpline(x, intensity[r0] / norm)(fine), color="#2f6f8f", label="as printed")
    ax_cut.plot(x, intensity[r0] / norm, "o", color="#2f6f8f", ms=4, label="computed samples")
    ax_cut.plot(fine, CubicSpline(x, ideal_intensity[r0] / norm)(fine), "k--", label="diffraction limited")
    ax_cut.set_xlim(-half * cell_mm, half * cell_mm)
    ax_cut.set_xlabel("x (mm)")
    ax_cut.set_title("cut through the peak (same scale)")
    ax_cut.legend(loc="upper right", fontsize=9)
    return _png(fig)


@_styled
def phase_map_png(phase_rad, aperture, cell_mm: float, freq_ghz: float) -> bytes:
    """Return the transmitted phase of each analysis cell inside the clear aperture."""
    fig = _figure(5.2, 4.4)
    ax = fig.add_subplot()
    ny, nx = phase_rad.shape
    extent = [-nx / 2 * cell_mm, nx / 2 * cell_mm, -ny / 2 * cell_mm, ny / 2 * cell_mm]
    im = ax.imshow(np.where(aperture, phase_rad, np.nan), origin="lower", extent=extent, cmap="twilight",
                   vmin=-np.pi, vmax=np.pi)
    fig.colorbar(im, ax=ax, label="phase (rad)")
    ax.set_xlabel("x from axis (mm)")
    ax.set_ylabel("y from axis (mm)")
    ax.set_title(f"Transmitted phase relative to the axis, as printed, {freq_ghz:g} GHz")
    return _png(fig)
