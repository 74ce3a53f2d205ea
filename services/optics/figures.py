"""PNG figures of the optics section, drawn with matplotlib's Agg backend (no display needed)."""

from __future__ import annotations

import io

import numpy as np


def _figure(width_in: float = 6.4, height_in: float = 3.6):
    from matplotlib.figure import Figure  # Figure objects use Agg directly, with no global pyplot state

    return Figure(figsize=(width_in, height_in), dpi=110, layout="constrained")


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def loss_png(freqs_ghz, absorption_db, reflection_db, spillover_db, designed_total_db) -> bytes:
    """Return stacked bars of absorption, reflection and spillover (dB) per frequency, as printed."""
    fig = _figure(8.0, 3.6)
    ax = fig.add_subplot()
    x = np.arange(len(freqs_ghz))
    bottom = np.zeros(len(x))
    for values, label, colour in ((absorption_db, "absorption", "#2f6f8f"), (reflection_db, "reflection", "#9cc5a1"),
                                  (spillover_db, "spillover", "#e0b04c")):
        ax.bar(x, values, 0.6, bottom=bottom, label=label, color=colour)
        bottom = bottom + np.asarray(values)
    ax.plot(x, designed_total_db, "k_", markersize=22, mew=2, label="as designed (absorption + reflection)")
    ax.set_xticks(x, [f"{f:g}" for f in freqs_ghz])
    ax.set_xlabel("frequency (GHz)")
    ax.set_ylabel("loss (dB)")
    ax.set_title("Loss through the printed part")
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return _png(fig)


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
    ax.legend(fontsize=8)
    return _png(fig)


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
    ax_map.set_title(f"{freq_ghz:g} GHz, {distance_mm:.1f} mm from the far extreme", fontsize=9)
    x = (np.arange(intensity.shape[1]) - c0) * cell_mm
    ax_cut.plot(x, intensity[r0] / norm, label="as printed")
    ax_cut.plot(x, ideal_intensity[r0] / norm, "k--", label="diffraction limited")
    ax_cut.set_xlim(-half * cell_mm, half * cell_mm)
    ax_cut.set_xlabel("x (mm)")
    ax_cut.legend(fontsize=8)
    return _png(fig)


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
    ax.set_title(f"Transmitted phase relative to the axis, as printed, {freq_ghz:g} GHz", fontsize=9)
    return _png(fig)
