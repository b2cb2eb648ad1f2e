"""Deforming a real image by an exactly known displacement field.

A recorded image is samples of an unknown continuous scene. The deformed images of the
self-check are computed as the band-limited scene the samples define would look after the
displacement, so the only model assumption is band-limitation (no polynomial interpolation
error, which would bias the check towards the matcher's own B-splines):

* rigid shifts: a Fourier phase ramp (:func:`scipy.ndimage.fourier_shift`) on the image
  extended by its mirror images to twice its size in each direction. The periodic repetition
  the discrete Fourier transform implies is then continuous (a plain zero or short mirror pad
  leaves a jump where the repetition wraps around, and the phase ramp spreads ringing from it
  across the whole image: 0.6 grey levels 36 px away for a 0.3 px shift of a 180 grey-level
  speckle);
* displacements that depend on one coordinate per image line (a stretch along x and y, the
  sinusoid of varying period): every line is evaluated at its exact reference positions by the
  trigonometric (DCT-II) interpolant of the line extended by its mirror image, summed with
  Clenshaw's recurrence. This is the same band-limited interpolant as the phase ramp, for any
  set of positions.

Close to the image (or crop) border the mirror extension has a kink, and band-limited
interpolation rings next to it, decaying over a few pixels: the self-check keeps its points
away from the border (see ``EDGE``).

Accuracy, against exact renders of an analytic speckle (:mod:`dic.images.synth`, radius 2.5 px,
180 grey levels of contrast), more than ``EDGE`` px from the border: largest error 0.009 grey
levels for a 0.37 px shift and for a 0.5 % stretch, 0.06 grey levels for the wave (which
compresses the pattern locally by up to 10 %); 0.05 grey levels at 8 px and 0.4 at 2 px from
the border. A real image that is not band-limited (aliased, speckles under ~2 px) is deformed
as its band-limited interpolant would be: the check then measures the matcher on that scene.

References
----------
.. [1] P. L. Reu, "Experimental and numerical methods for exact subpixel shifting", Exp. Mech.
   51 (2011) 443-452.
.. [2] S. A. Martucci, "Symmetric convolution and the discrete sine and cosine transforms",
   IEEE Trans. Signal Process. 42 (1994) 1038-1051 (the DCT-II and the mirror extension).
"""

from __future__ import annotations

import numpy as np

__all__ = ["shift_image", "resample_lines", "stretch_image", "wave_image", "wave_periods",
           "EDGE"]

#: pixels next to the deformed image's border that the self-check does not measure
EDGE = 8


def shift_image(image, dx: float, dy: float) -> np.ndarray:
    """The image of the scene moved rigidly by ``(dx, dy)`` px (``g(x) = f(x - d)``).

    Parameters
    ----------
    image : ndarray
        Float image.
    dx, dy : float
        Shift along x (columns) and y (rows), px.

    Returns
    -------
    ndarray
        Same shape; exact (band-limited) away from the border.
    """
    from scipy import fft, ndimage

    img = np.asarray(image, dtype=np.float64)
    rows, cols = img.shape
    even = np.block([[img, img[:, ::-1]], [img[::-1], img[::-1, ::-1]]])
    spec = ndimage.fourier_shift(fft.fft2(even), (float(dy), float(dx)))
    return np.real(fft.ifft2(spec))[:rows, :cols]


def resample_lines(image, positions, axis: int = 1) -> np.ndarray:
    """Evaluate every line of an image at given positions by band-limited interpolation.

    Parameters
    ----------
    image : ndarray, shape (rows, cols)
    positions : ndarray
        Positions (px, pixel centres at 0, 1, ...) along ``axis``: shape ``(n,)`` for the same
        positions on every line, or the image's shape for positions per line. Positions should
        lie in ``[-0.5, length - 0.5]``.
    axis : {0, 1}
        1: along rows (x); 0: along columns (y).

    Returns
    -------
    ndarray
        The image with ``axis`` resampled (length ``n`` for 1-D positions).

    Notes
    -----
    The line ``f_0 .. f_{N-1}`` extended by its mirror image has the DCT-II expansion
    ``f(t) = C_0 / (2N) + (1/N) sum_{k>=1} C_k cos(pi k (2t + 1) / (2N))`` with
    ``C_k = 2 sum_n f_n cos(pi k (2n + 1) / (2N))`` (:func:`scipy.fft.dct`, type 2), exact at the
    samples; it is summed at any ``t`` by Clenshaw's recurrence for Chebyshev series.
    """
    from scipy import fft

    img = np.asarray(image, dtype=np.float64)
    if axis == 0:
        pos = np.asarray(positions, dtype=np.float64)
        return resample_lines(img.T, pos.T if pos.ndim == 2 else pos, axis=1).T
    n = img.shape[1]
    coef = fft.dct(img, type=2, axis=1) / n           # (rows, n)
    coef[:, 0] *= 0.5
    pos = np.asarray(positions, dtype=np.float64)
    theta = np.pi * (2.0 * pos + 1.0) / (2.0 * n)
    x = np.cos(theta)
    if pos.ndim == 1:
        x = np.broadcast_to(x, (img.shape[0], pos.size))
    two_x = 2.0 * x
    b1 = np.zeros(x.shape)
    b2 = np.zeros(x.shape)
    for k in range(n - 1, 0, -1):
        b1, b2 = coef[:, k:k + 1] + two_x * b1 - b2, b1
    return coef[:, 0:1] + x * b1 - b2


def stretch_image(image, exx: float, eyy: float, centre) -> np.ndarray:
    """The image of the scene under the homogeneous stretch ``u = exx (X - xc)``,
    ``v = eyy (Y - yc)`` (``F = diag(1 + exx, 1 + eyy)``).

    Parameters
    ----------
    image : ndarray
    exx, eyy : float
        Engineering (Biot) normal strains.
    centre : (float, float)
        ``(xc, yc)``: the point that does not move, px.

    Returns
    -------
    ndarray
        Same shape.
    """
    img = np.asarray(image, dtype=np.float64)
    xc, yc = centre
    rows, cols = img.shape
    X = xc + (np.arange(cols) - xc) / (1.0 + exx)
    Y = yc + (np.arange(rows) - yc) / (1.0 + eyy)
    return resample_lines(resample_lines(img, X, axis=1), Y, axis=0)


def wave_periods(x, x0: float, x1: float, p0: float, p1: float):
    """Period at column ``x``: geometric from ``p0`` at ``x0`` to ``p1`` at ``x1`` (clamped)."""
    t = np.clip((np.asarray(x, dtype=np.float64) - x0) / max(x1 - x0, 1e-9), 0.0, 1.0)
    return p0 * (p1 / p0) ** t


def wave_image(image, amplitude: float, periods, yc: float) -> np.ndarray:
    """The image of the scene under ``v = A sin(2 pi (Y - yc) / p(X))``, ``u = 0``.

    Every column moves along itself only, so each column is resampled at the reference rows
    ``Y`` solving ``Y + v(X, Y) = y`` (Newton's method to 1e-12 px).

    Parameters
    ----------
    image : ndarray, shape (rows, cols)
    amplitude : float
        ``A`` in px; ``2 pi A / p`` must stay below 1 (no folding).
    periods : ndarray, shape (cols,)
        Period of each column, px.
    yc : float
        Row of zero phase.

    Returns
    -------
    ndarray
        Same shape.
    """
    img = np.asarray(image, dtype=np.float64)
    rows, cols = img.shape
    p = np.asarray(periods, dtype=np.float64)[None, :]
    A = float(amplitude)
    k = 2.0 * np.pi / p
    if np.any(np.abs(A) * k >= 0.9):
        raise ValueError(f"amplitude {A} px folds the wave at its shortest period "
                         f"{p.min():.1f} px; use 2 pi A / period < 0.9")
    y = np.arange(rows, dtype=np.float64)[:, None] + np.zeros((1, cols))
    Y = y.copy()
    for _ in range(50):
        r = Y + A * np.sin(k * (Y - yc)) - y
        Y -= r / (1.0 + A * k * np.cos(k * (Y - yc)))
        if np.max(np.abs(r)) < 1e-12:
            break
    return resample_lines(img, Y, axis=0)
