"""Small PNG pictures for the review page: grey images and colour maps of a value grid."""

from __future__ import annotations

import base64

import numpy as np

__all__ = ["grey_png", "map_png", "map_rgba", "data_url", "SIGNED_MAP", "MAGNITUDE_MAP",
           "colour_map_for", "robust_limits", "limits_for_top", "MAX_SIDE"]

#: colour map of signed quantities (centred on zero) and of magnitudes, as in the figures
SIGNED_MAP = "RdBu_r"
MAGNITUDE_MAP = "cividis"
#: components that are never negative (shown with the magnitude map)
_MAGNITUDES = {"max_shear", "equivalent"}


def colour_map_for(component: str) -> str:
    """``"cividis"`` for never-negative components, ``"RdBu_r"`` (centred) for the others."""
    return MAGNITUDE_MAP if component in _MAGNITUDES else SIGNED_MAP


def _encode_png(array) -> bytes:
    import cv2

    ok, buf = cv2.imencode(".png", array, [cv2.IMWRITE_PNG_COMPRESSION, 1])
    if not ok:  # pragma: no cover -- OpenCV always encodes uint8 arrays
        raise ValueError("could not encode a PNG picture")
    return buf.tobytes()


#: images larger than this (px, either side) are sent shrunk by a whole factor; the page
#: stretches them back over the image's own coordinates
MAX_SIDE = 2048


def grey_png(image) -> bytes:
    """An image of grey levels as an 8-bit PNG, stretched between its 0.5 and 99.5 percentiles.

    Images with a side over :data:`MAX_SIDE` px are shrunk by a whole factor (pixel areas
    averaged), so the page never receives more than a few megabytes.

    Parameters
    ----------
    image : ndarray, 2-D
    """
    img = np.asarray(image, dtype=np.float64)
    shrink = -(-max(img.shape) // MAX_SIDE)
    if shrink > 1:
        import cv2

        img = cv2.resize(img, (-(-img.shape[1] // shrink), -(-img.shape[0] // shrink)),
                         interpolation=cv2.INTER_AREA)
    lo, hi = np.percentile(img, (0.5, 99.5))
    if not hi > lo:
        lo, hi = float(img.min()), float(img.min()) + 1.0
    out = np.clip((img - lo) * (255.0 / (hi - lo)), 0, 255) + 0.5
    return _encode_png(out.astype(np.uint8))


def robust_limits(values, component: str) -> tuple[float, float]:
    """Colour limits of a set of values, as the report's maps draw them: ``(-top, top)`` for
    signed components and ``(0, top)`` for magnitudes, ``top`` the 99.5th percentile of the
    absolute finite values (:func:`dic.figures.common.robust_top`), so that a few wild points
    do not wash out the map; ``(-1, 1)`` or ``(0, 1)`` when nothing is finite.
    """
    from dic.figures.common import robust_top

    return limits_for_top(robust_top(np.asarray(values, dtype=np.float64)), component)


def limits_for_top(top: float, component: str) -> tuple[float, float]:
    """``(-top, top)`` for signed components, ``(0, top)`` for magnitudes; 1 for a zero top."""
    from dic.figures.common import limits_from_top

    return limits_from_top(top if top > 0 else 1.0, colour_map_for(component) == SIGNED_MAP)


def map_rgba(values, lo: float, hi: float, cmap: str) -> np.ndarray:
    """Values -> RGBA uint8 (rows, cols, 4) through a matplotlib colour map; NaN transparent."""
    from matplotlib import colormaps

    v = np.asarray(values, dtype=np.float64)
    t = (v - lo) / (hi - lo) if hi > lo else np.zeros_like(v)
    rgba = colormaps[cmap](np.clip(np.nan_to_num(t, nan=0.0), 0.0, 1.0), bytes=True)
    rgba[..., 3] = np.where(np.isfinite(v), 255, 0)
    return rgba


def map_png(values, lo: float, hi: float, cmap: str) -> bytes:
    """A colour map of a value grid as an RGBA PNG (one pixel per grid point, NaN transparent)."""
    rgba = map_rgba(values, lo, hi, cmap)
    return _encode_png(np.ascontiguousarray(rgba[..., [2, 1, 0, 3]]))  # OpenCV wants B, G, R, A


def data_url(png: bytes) -> str:
    """A PNG as a ``data:`` address for an ``<img>`` of the page."""
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")
