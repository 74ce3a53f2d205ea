"""PNG plots of a material's RF data against frequency, and of a measured-material fit against its files."""

from __future__ import annotations

import numpy as np

from services.optics.figures import _figure, _png, _styled
from services.optics.material_fit import MaterialFit
from services.optics.materials import FAR_OUTSIDE_FACTOR, rf_values
from services.profiles import Material


@_styled
def material_rf_png(material: Material) -> bytes:
    """Return eps_r and tan delta against frequency: numbered data points, the interpolation, the reach and the band."""
    fig = _figure(8.4, 5.2)
    ax_eps, ax_tand = fig.subplots(2, 1, sharex=True)
    pts = sorted(material.rf, key=lambda p: p.freq_ghz)
    lo, hi = pts[0].freq_ghz, pts[-1].freq_ghz
    inside = np.geomspace(lo, hi, 200) if hi > lo else np.array([lo])
    below = np.geomspace(lo / FAR_OUTSIDE_FACTOR, lo, 40)
    above = np.geomspace(hi, hi * FAR_OUTSIDE_FACTOR, 40)
    for ax, key, label in ((ax_eps, "eps_r", "permittivity εr"), (ax_tand, "tan_delta", "loss tangent tan δ")):
        for f, style, text in ((inside, "-", "interpolated"), (below, "--", f"extrapolated, a caution (refused beyond x{FAR_OUTSIDE_FACTOR:g})"), (above, "--", None)):
            ax.plot(f, getattr(rf_values(material, f), key), style, color="#2f6f8f", lw=1.5, label=text)
        values = [getattr(p, key) for p in pts]
        ax.plot([p.freq_ghz for p in pts], values, "o", color="#c0392b", label="data point (number: source row)")
        for i, (p, v) in enumerate(zip(pts, values), start=1):
            ax.annotate(str(i), (p.freq_ghz, v), textcoords="offset points", xytext=(4, 5))
        if material.band_ghz:
            ax.axvspan(*material.band_ghz, color="#e0b04c", alpha=0.25, lw=0, label="design band")
        ax.set_ylabel(label)
        ax.set_xscale("log")
        ax.grid(True, which="both", alpha=0.3)
    ax_tand.set_yscale("log")
    from matplotlib.ticker import FuncFormatter, NullFormatter

    plain = FuncFormatter(lambda v, _: f"{v:g}")  # 100 and 0.03, not 10^2 and 3x10^-2
    ax_tand.xaxis.set_major_formatter(plain)
    ax_tand.xaxis.set_minor_formatter(NullFormatter())
    ax_tand.yaxis.set_major_formatter(plain)
    ax_tand.yaxis.set_minor_formatter(plain)  # a loss tangent often spans less than a decade
    ax_tand.set_xlabel("frequency (GHz)")
    ax_eps.set_title(f"{material.name}: RF data")
    ax_eps.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return _png(fig)


@_styled
def material_fit_png(fit: MaterialFit) -> bytes:
    """Return |S21| and |S11| in dB of each sample, measured (points) against the fitted slab (lines)."""
    fig = _figure(9.0, 4.6)
    ax = fig.add_subplot()
    colours = ("#2f6f8f", "#c0392b", "#4a8f2f", "#8f5a2f", "#6a2f8f")

    def db(x):
        return 20 * np.log10(np.maximum(np.abs(x), 1e-6))

    for k, sample in enumerate(fit.samples):
        c = colours[k % len(colours)]
        s11, s21 = fit.model(sample)
        tag = f"{sample.name} ({sample.thickness_mm:g} mm)"
        ax.plot(fit.freqs_ghz, db(sample.s21), "o", ms=3, color=c, label=f"{tag} |S21| measured")
        ax.plot(fit.freqs_ghz, db(s21), "-", color=c, label=f"{tag} |S21| fit")
        ax.plot(fit.freqs_ghz, db(sample.s11), "^", ms=3, color=c, alpha=0.6, label=f"{tag} |S11| measured")
        ax.plot(fit.freqs_ghz, db(s11), ":", color=c, label=f"{tag} |S11| fit")
    ax.set_xlabel("frequency (GHz)")
    ax.set_ylabel("|S| (dB)")
    ax.set_title(f"Measured against the fitted slab (rms misfit {fit.rms_misfit:.3g})")
    ax.grid(True, alpha=0.3)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return _png(fig)
