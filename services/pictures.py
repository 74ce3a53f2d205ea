"""Small PNG pictures made by the worker: maps with a colour bar and a millimetre scale bar."""

from __future__ import annotations

import io

import numpy as np
from PIL import Image, ImageDraw, ImageFont

# A perceptually ordered dark-blue -> teal -> amber ramp of our own.
_RAMP = np.array([[22, 27, 58], [32, 86, 130], [38, 145, 150], [120, 190, 120], [236, 200, 80], [250, 246, 214]], float)
VOID_RGB = (243, 244, 246)
MATERIAL_RGB = (120, 129, 148)
HIGHLIGHT_RGB = (214, 40, 57)


def colour_ramp(values: np.ndarray) -> np.ndarray:
    """Return (..., 3) uint8 colours for values in [0, 1]."""
    t = np.clip(np.nan_to_num(values), 0, 1) * (len(_RAMP) - 1)
    i = np.minimum(t.astype(int), len(_RAMP) - 2)
    f = (t - i)[..., None]
    return (_RAMP[i] * (1 - f) + _RAMP[i + 1] * f).astype(np.uint8)


def nice_length(target: float) -> float:
    """Return a 1-2-5 length not above ``target`` (for scale bars)."""
    if target <= 0:
        return 0.0
    p = 10 ** np.floor(np.log10(target))
    for m in (5, 2, 1):
        if m * p <= target:
            return float(m * p)
    return float(p)


def _font(size: int = 13):
    try:
        return ImageFont.load_default(size=size)
    except TypeError:  # older Pillow without sized default fonts
        return ImageFont.load_default()


def _fit(rgb: np.ndarray, max_px: int) -> tuple[Image.Image, float]:
    """Return the image scaled so its longer side is about ``max_px``, and the scale used."""
    img = Image.fromarray(rgb[::-1])  # row 0 is the lowest y: flip so +y points up on screen
    scale = max_px / max(img.size)
    size = (max(1, round(img.size[0] * scale)), max(1, round(img.size[1] * scale)))
    return img.resize(size, Image.NEAREST if scale >= 1 else Image.BILINEAR), scale


def _add_scale_bar(canvas: Image.Image, x0: int, y0: int, px_per_mm: float, width_px: int) -> None:
    length_mm = nice_length(0.3 * width_px / px_per_mm)
    bar = max(1, round(length_mm * px_per_mm))
    draw = ImageDraw.Draw(canvas)
    draw.rectangle([x0, y0, x0 + bar, y0 + 5], fill=(20, 20, 20))
    label = f"{length_mm:g} mm"
    draw.text((x0 + bar + 8, y0 - 5), label, fill=(20, 20, 20), font=_font())


def map_png(values: np.ndarray, *, pixel_mm: float, unit: str, title: str, mask: np.ndarray | None = None,
            max_px: int = 520) -> bytes:
    """Return a PNG of a 2-D map (row 0 = lowest y) with a colour bar and a mm scale bar."""
    vmax = float(np.nanmax(values)) if np.any(np.isfinite(values)) else 1.0
    vmin = float(np.nanmin(values)) if np.any(np.isfinite(values)) else 0.0
    span = vmax - vmin or 1.0
    rgb = colour_ramp((values - vmin) / span)
    if mask is not None:
        rgb[~mask] = VOID_RGB
    img, scale = _fit(rgb, max_px)
    pad, bar_w = 16, 16
    canvas = Image.new("RGB", (img.width + 2 * pad + bar_w + 90, img.height + 2 * pad + 44), "white")
    canvas.paste(img, (pad, pad + 22))
    draw = ImageDraw.Draw(canvas)
    draw.text((pad, 4), title, fill=(20, 20, 20), font=_font(14))
    ramp = colour_ramp(np.linspace(1, 0, img.height)[:, None].repeat(bar_w, 1))
    canvas.paste(Image.fromarray(ramp), (pad * 2 + img.width, pad + 22))
    draw.text((pad * 2 + img.width + bar_w + 6, pad + 18), f"{vmax:.3g} {unit}", fill=(20, 20, 20), font=_font())
    draw.text((pad * 2 + img.width + bar_w + 6, pad + 14 + img.height), f"{vmin:.3g} {unit}", fill=(20, 20, 20), font=_font())
    _add_scale_bar(canvas, pad, pad + 30 + img.height, scale / pixel_mm, img.width)
    return _png(canvas)


def layer_crop_png(layer: np.ndarray, highlight: np.ndarray, *, pixel_mm: float, title: str, max_px: int = 360) -> bytes:
    """Return a PNG of a layer crop: material grey, void light, highlighted pixels red, mm scale bar."""
    rgb = np.empty(layer.shape + (3,), np.uint8)
    rgb[:] = VOID_RGB
    rgb[layer] = MATERIAL_RGB
    rgb[highlight] = HIGHLIGHT_RGB
    img, scale = _fit(rgb, max_px)
    pad = 12
    canvas = Image.new("RGB", (img.width + 2 * pad, img.height + 2 * pad + 42), "white")
    ImageDraw.Draw(canvas).text((pad, 4), title, fill=(20, 20, 20), font=_font(13))
    canvas.paste(img, (pad, pad + 18))
    _add_scale_bar(canvas, pad, pad + 28 + img.height, scale / pixel_mm, img.width)
    return _png(canvas)


def _png(img: Image.Image) -> bytes:
    buf = io.BytesIO()
    img.save(buf, format="PNG", optimize=True)
    return buf.getvalue()
