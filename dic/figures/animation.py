"""Animations of a strain component through a sequence: GIF and MP4 through imageio.

Every frame is drawn with :func:`dic.figures.maps.strain_map` into one figure whose layout is
fixed after the first frame, with colour limits fixed for the whole sequence (given, or from
:func:`dic.figures.common.strain_limits`), so a colour means the same strain in every frame. A
caption gives the frame number, the image, its time and, if given, the force. GIF is written with
Pillow, MP4 (H.264) with the ffmpeg program that the ``imageio-ffmpeg`` package ships.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from dic.figures.common import (STRAIN_QUANTITIES, check_alpha, check_configuration,
                                check_limits, check_size, colormap, display_unit, find_image,
                                frame_indices, open_results, quantity_label, quantity_name,
                                strain_limits)
from dic.figures.layers import draw_colorbar
from dic.figures.maps import strain_map
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["ANIMATION_FORMATS", "animate"]

#: file types :func:`animate` writes
ANIMATION_FORMATS = (".gif", ".mp4")
# H.264 in the common yuv420p pixel format needs even sizes; 16 keeps every encoder happy
_BLOCK = 16


def _per_frame(values, n, name):
    if values is None:
        return None
    arr = np.asarray(values, dtype=np.float64).ravel()
    if arr.size != n:
        raise ValueError(f"{name}: {arr.size} values for {n} frames; give one value per frame "
                         f"of the results (NaN where unknown)")
    return arr


def _caption(k, n, name, t, f, force_unit):
    parts = [f"frame {k} / {n - 1}"]
    if name:
        parts.append(Path(str(name)).name)
    if t is not None and math.isfinite(t):
        parts.append(f"t = {t:.3g} s")
    if f is not None and math.isfinite(f):
        parts.append(f"force {f:.4g} {force_unit}".rstrip())
    return "   \u00b7   ".join(parts)


def _rgb(fig):
    """The figure as an (h, w, 3) uint8 array, padded with white to multiples of 16 px."""
    fig.canvas.draw()
    rgba = np.asarray(fig.canvas.buffer_rgba())
    h, w = rgba.shape[:2]
    H, W = -(-h // _BLOCK) * _BLOCK, -(-w // _BLOCK) * _BLOCK
    out = np.full((H, W, 3), 255, dtype=np.uint8)
    out[:h, :w] = rgba[..., :3]
    return out


def animate(results, path, *, component="xx", window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE,
            frames=None, limits=None, units="auto", configuration="reference", images=None,
            times=None, force=None, force_unit="kN", fps=4.0, size=(8.0, 4.5), dpi=100,
            alpha=0.7):
    """Write an animation of one strain component through a sequence.

    Parameters
    ----------
    results : str, os.PathLike or dic.sequence.Results
        The results file.
    path : str or os.PathLike
        Output file ending in ``.gif`` or ``.mp4``; its folder must exist.
    component : str, optional
        One of :data:`dic.figures.common.STRAIN_QUANTITIES` (``xy`` is tensor shear).
    window, measure : optional
        Strain window and measure, as for :func:`dic.strain_field`.
    frames : sequence of int or slice, optional
        Frames to show (default all completed frames).
    limits : (float, float), optional
        Colour limits for every frame (plain strain numbers); by default
        :func:`dic.figures.common.strain_limits` over the frames shown.
    units : {'auto', 'microstrain', '%'}, optional
    configuration : {'reference', 'deformed'}, optional
        Draw on the reference grid over the reference image, or following the specimen over
        each frame's own image.
    images : sequence or False, optional
        Background images, one per frame of the results (arrays or paths); by default the
        results file's image files where they can be found (next to the names stored, or in
        the results file's folder); ``False`` for none.
    times : array_like, optional
        Time of every frame in s; by default the results file's image times.
    force : array_like, optional
        Force at every frame of the results (NaN where unknown), shown in the caption.
    force_unit : str, optional
    fps : float, optional
        Frames per second.
    size : (float, float), optional
        Frame size in inches; with ``dpi`` it sets the pixel size (rounded up to a multiple of
        16 px with a white margin, as video encoders need).
    dpi : float, optional
    alpha : float, optional
        Opacity of the map over the image.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        Bad component, measure, frames, limits, units, sizes or per-frame arrays; an empty
        results file.
    OSError
        Unsupported file type, missing folder, unreadable results file or the file cannot be
        written.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure

    p = Path(os.fspath(path))
    ext = p.suffix.lower()
    if ext not in ANIMATION_FORMATS:
        raise OSError(f"path: cannot write '{p}': unsupported animation type {ext or '(none)'}; "
                      f"use {', '.join(ANIMATION_FORMATS)}")
    if not p.parent.is_dir():
        raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it before "
                                f"writing '{p.name}'")
    name = quantity_name(component)
    from dic.strain import canonical_measure

    measure = canonical_measure(measure)
    config = check_configuration(configuration)
    check_alpha(alpha)
    width, height = check_size(size, "size")
    try:
        fps, dpi = float(fps), float(dpi)
    except (TypeError, ValueError):
        fps = dpi = float("nan")
    if not (fps > 0 and dpi > 0 and math.isfinite(fps) and math.isfinite(dpi)):
        raise ValueError(f"fps and dpi must be positive numbers, got fps={fps!r}, dpi={dpi!r}; "
                         f"e.g. fps=4, dpi=100")

    res, opened = open_results(results)
    try:
        n = len(res)
        order = frame_indices(frames, n)
        if images is not None and images is not False:
            images = list(images)
            if len(images) != n:
                raise ValueError(f"images: {len(images)} given for {n} frames; give one per "
                                 f"frame of the results, or False for none")
        if times is None and getattr(res, "image_times", None) is not None:
            times = np.asarray(res.image_times, dtype=np.float64)[:n]
        t_all = _per_frame(times, n, "times")
        f_all = _per_frame(force, n, "force")
        if limits is None:
            lo, hi = strain_limits(res, name, frames=order, window=window, measure=measure)
        else:
            lo, hi = check_limits(limits)
        kind = STRAIN_QUANTITIES[name][2]
        factor, symbol, unit_name = display_unit(units, kind, max(abs(lo), abs(hi)))
        signed = STRAIN_QUANTITIES[name][1]
        scale = getattr(res, "scale", None)
        reference_image = None
        if config == "reference" and images is None:
            reference_image = find_image(res, None)

        fig = Figure(figsize=(width, height), dpi=dpi, layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.add_subplot()
        key = ScalarMappable(norm=Normalize(lo * factor, hi * factor),
                             cmap=colormap(None, signed))
        writer, gif_frames = None, []
        try:
            if ext == ".mp4":
                import imageio.v2 as iio

                writer = iio.get_writer(p, format="FFMPEG", mode="I", fps=fps,
                                        codec="libx264", pixelformat="yuv420p", quality=8,
                                        macro_block_size=_BLOCK, ffmpeg_log_level="error")
            first = True
            for k in order:
                s = res.strain(k, window=window, measure=measure)
                fld = res.field(k) if config == "deformed" else None
                if images is False:
                    img = None
                elif images is not None:
                    img = images[k]
                elif config == "deformed":
                    img = find_image(res, k)
                else:
                    img = reference_image
                ax.clear()
                strain_map(s, img, component=name, field=fld, configuration=config, ax=ax,
                           alpha=alpha, limits=(lo, hi), units=unit_name, scale=scale,
                           colorbar=False, title=quantity_label(name, measure, symbol))
                cap = _caption(k, n, res.image_names[k] if hasattr(res, "image_names") else "",
                               None if t_all is None else float(t_all[k]),
                               None if f_all is None else float(f_all[k]), force_unit)
                if first:
                    horizontal = width >= 1.3 * height
                    draw_colorbar(fig, key, ax, quantity_label(name, measure, symbol),
                                  np.array([lo * factor - 1, hi * factor + 1] if signed
                                           else [hi * factor + 1]),
                                  lo * factor, hi * factor, horizontal)
                    caption = fig.text(0.01, 0.005, cap, fontsize=9, ha="left", va="bottom")
                    fig.get_layout_engine().set(h_pad=0.25)
                    fig.canvas.draw()
                    fig.set_layout_engine("none")  # freeze: every frame has the same layout
                    first = False
                else:
                    caption.set_text(cap)
                frame = _rgb(fig)
                if writer is not None:
                    writer.append_data(frame)
                else:
                    gif_frames.append(frame)
            if writer is None:
                import imageio.v3 as iio3

                iio3.imwrite(p, np.stack(gif_frames), plugin="pillow", extension=".gif",
                             duration=1000.0 / fps, loop=0)
        except OSError as exc:
            from dic.files import write_error

            raise write_error(p, exc) from None
        finally:
            if writer is not None:
                writer.close()
    finally:
        if opened:
            res.close()
    return p
