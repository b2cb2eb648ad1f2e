"""Maps of two-camera results over the left reference image: out-of-plane motion W and shape.

surface_map
    ``"W"`` (displacement along the left camera's optical axis, mm), ``"U"``, ``"V"``, or
    ``"shape"``: the reference surface's distance from its best-fit plane (mm, positive toward
    the cameras), from the ``/stereo`` group of a results file
    (:mod:`dic.sequence.stereofile`).

Signed quantities use ``RdBu_r`` centred on zero; points without a 3-D position are left
transparent, so the image shows through.
"""

from __future__ import annotations

import numpy as np

__all__ = ["surface_map", "SURFACE_QUANTITIES"]

#: quantity -> (title, colour-bar label)
SURFACE_QUANTITIES = {
    "W": ("Out-of-plane displacement W", "W (mm, along the left camera's axis)"),
    "U": ("Displacement U", "U (mm, along image columns)"),
    "V": ("Displacement V", "V (mm, along image rows)"),
    "shape": ("Shape of the reference surface", "distance from the best-fit plane (mm, + toward "
              "the cameras)"),
}


def surface_map(results, k=-1, quantity="W", *, image=None, ax=None, alpha=0.75, title=None):
    """Map of a two-camera quantity over the left reference image.

    Parameters
    ----------
    results : str or os.PathLike
        A results file with a ``/stereo`` group.
    k : int, optional
        Frame (negative counts from the end); ignored for ``"shape"``.
    quantity : {'W', 'U', 'V', 'shape'}
    image : ndarray, optional
        The left reference image, drawn in grey below the map.
    ax : matplotlib Axes, optional
    alpha : float, optional
        Opacity of the coloured cells.
    title : str, optional

    Returns
    -------
    fig, ax
    """
    from matplotlib.figure import Figure

    from dic.errors import InputError
    from dic.sequence.reader import Results
    from dic.sequence.stereofile import load_stereo

    if quantity not in SURFACE_QUANTITIES:
        raise InputError(f"quantity: {quantity!r} is not one of {', '.join(SURFACE_QUANTITIES)}")
    st = load_stereo(results)
    n = st.X.shape[0]
    if not isinstance(k, (int, np.integer)) or not -n <= k < n:
        raise InputError(f"k: frame {k!r} is not stored; use 0 to {n - 1}")
    k = int(k) % n
    with Results.open(results) as r:
        x, y = r.grid_x, r.grid_y
    if quantity == "shape":
        values = st.shape_mm()
    else:
        values = getattr(st, quantity)[k]
    name, label = SURFACE_QUANTITIES[quantity]
    if ax is None:
        fig = Figure(figsize=(7, 5.2), layout="constrained")   # no pyplot: nothing to close
        ax = fig.add_subplot()
    else:
        fig = ax.figure
    if image is not None:
        ax.imshow(np.asarray(image, float), cmap="gray", interpolation="nearest")
    step = float(np.median(np.diff(x[0]))) if x.shape[1] > 1 else 1.0
    xe = np.r_[x[0] - step / 2, x[0, -1] + step / 2]
    ye = np.r_[y[:, 0] - step / 2, y[-1, 0] + step / 2]
    finite = values[np.isfinite(values)]
    top = float(np.percentile(np.abs(finite), 99.5)) if finite.size else 1.0
    top = top if top > 0 else 1.0
    mesh = ax.pcolormesh(xe, ye, np.ma.masked_invalid(values), cmap="RdBu_r", vmin=-top,
                         vmax=top, alpha=alpha, shading="flat")
    fig.colorbar(mesh, ax=ax, label=label, shrink=0.85)
    ax.set_xlim(xe[0] - step, xe[-1] + step)
    ax.set_ylim(ye[-1] + step, ye[0] - step)
    ax.set_aspect("equal")
    ax.set_xlabel("x (px, left reference image)")
    ax.set_ylabel("y (px)")
    measured = int(np.isfinite(values).sum())
    where = "" if quantity == "shape" else f", frame {k}"
    ax.set_title(title or f"{name}{where}\n{measured} of {values.size} points in 3-D"
                 + (f"; {np.nanmin(values):.3f} to {np.nanmax(values):.3f} mm" if measured
                    else ""))
    return fig, ax
