"""Seed points: where to try them (:func:`seed_candidates`) and their whole-pixel starting
guess by zero-normalised FFT cross-correlation (:func:`fft_guess`)."""

from __future__ import annotations

import numpy as np

#: seeds tried in a part of the ROI, near its centre and spread from it
SEED_TRIES = 7
#: further seed tries in a large part where those failed, at its best-textured points
TEXTURE_TRIES = 12


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


def seed_candidates(comp_idx, px, py, texture=None, spacing=0):
    """Seed trial order for a component: nearest its centroid first, then spread out; then,
    when ``texture`` (a function of point indices) is given, the component's best-textured
    points, at least ``spacing`` px from every point tried before (a generator: these are
    ranked only if the first tries fail)."""
    cx, cy = px[comp_idx].mean(), py[comp_idx].mean()
    order = comp_idx[np.argsort((px[comp_idx] - cx) ** 2 + (py[comp_idx] - cy) ** 2,
                                kind="stable")]
    if order.size <= SEED_TRIES:
        yield from order
        return
    # the centre first, then points at growing distance from it
    picks = order[np.unique(np.linspace(0, order.size - 1, SEED_TRIES).astype(int))]
    yield from picks
    if texture is None:
        return
    # a large part whose centre lies on poor texture (a depth step, a shadow): its best
    # textured subsets, spread over it
    tried = list(picks)
    for k in comp_idx[np.argsort(-texture(comp_idx), kind="stable")]:
        if len(tried) >= SEED_TRIES + TEXTURE_TRIES:
            break
        if np.min((px[tried] - px[k]) ** 2 + (py[tried] - py[k]) ** 2) < spacing ** 2:
            continue
        tried.append(k)
        yield k
