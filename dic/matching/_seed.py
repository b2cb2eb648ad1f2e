"""Whole-pixel starting guess for a seed point by zero-normalised FFT cross-correlation."""

from __future__ import annotations

import numpy as np


def fft_guess(reference, deformed, x, y, *, half, search):
    """Integer displacement of the subset around ``(x, y)`` that maximises ZNCC.

    The reference subset of half-width ``half`` is correlated with a window of the deformed image
    that extends ``search`` pixels beyond it in every direction (clipped to the image), by the
    zero-normalised cross-correlation of OpenCV's ``matchTemplate`` (``TM_CCOEFF_NORMED``, in
    single precision: plenty for a whole-pixel search, and a tenth of the time of the FFT form
    in ``skimage.feature.match_template``, which gives the same scores).

    Parameters
    ----------
    reference, deformed : ndarray
        Images.
    x, y : int
        Subset centre (column, row).
    half : int
        Half-width of the template.
    search : int
        Search radius in pixels.

    Returns
    -------
    du, dv : int
        Displacement of the best match.
    score : float
        Its ZNCC (-1 to 1); NaN if the window is too small.

    References
    ----------
    .. [1] J. P. Lewis, "Fast normalized cross-correlation", Vision Interface (1995) 120-123.
    """
    import cv2

    rows, cols = deformed.shape
    tpl = reference[y - half:y + half + 1, x - half:x + half + 1]
    r0, r1 = max(0, y - half - search), min(rows, y + half + search + 1)
    c0, c1 = max(0, x - half - search), min(cols, x + half + search + 1)
    win = deformed[r0:r1, c0:c1]
    if win.shape[0] < tpl.shape[0] or win.shape[1] < tpl.shape[1] or np.ptp(tpl) == 0:
        return 0, 0, float("nan")
    score = cv2.matchTemplate(np.ascontiguousarray(win, dtype=np.float32),
                              np.ascontiguousarray(tpl, dtype=np.float32), cv2.TM_CCOEFF_NORMED)
    # a flat part of the window has no defined score
    score = np.where(np.isfinite(score), np.clip(score, -1.0, 1.0), -1.0)
    r, c = np.unravel_index(int(np.argmax(score)), score.shape)
    return int(c0 + c + half - x), int(r0 + r + half - y), float(score[r, c])
