"""Image noise: its standard deviation estimated from one image or from two static images."""

from __future__ import annotations

import numpy as np

__all__ = ["image_noise", "pair_noise"]

#: side of the square blocks whose covariance gives the single-image estimate
BLOCK = 7
#: at most this many blocks enter the covariance (a regular subsample beyond it)
_MAX_BLOCKS = 60_000
#: a grey level shared by more than this share of the pixels at the image's extreme is taken
#: as clipped (saturated or black), and blocks touching it are left out
_PILE_UP = 1e-3


def _as_image(image, name):
    from dic.images.io import read_image

    return read_image(image, name=name)


def _region(shape, roi, name="roi"):
    """Boolean mask of the pixels to use (the whole image when roi is None)."""
    if roi is None:
        return None
    from dic.images.roi import make_roi

    return make_roi(roi, shape)


def _clipped(img):
    """Pixels at a piled-up extreme grey level (saturation or black clipping)."""
    out = np.zeros(img.shape, bool)
    for value in (img.max(), img.min()):
        hit = img == value
        if hit.mean() > _PILE_UP:
            out |= hit
    return out


def _box_sum(mask, k):
    """Sums of ``mask`` over every k x k block (top-left corner indexing), by an integral image."""
    c = np.zeros((mask.shape[0] + 1, mask.shape[1] + 1), np.int64)
    c[1:, 1:] = np.cumsum(np.cumsum(mask, axis=0, dtype=np.int64), axis=1)
    return c[k:, k:] - c[:-k, k:] - c[k:, :-k] + c[:-k, :-k]


def image_noise(image, *, roi=None, block: int = BLOCK, max_blocks: int = _MAX_BLOCKS) -> float:
    """Standard deviation of the additive noise of one image, estimated from the image alone.

    The noise variance is the smallest eigenvalue of the sample covariance of all
    ``block x block`` pixel blocks (Pyatykh, Hesser & Zheng 2013), divided by
    ``(1 - sqrt(d / n))^2`` (``d = block**2``, ``n`` blocks), the lower edge of the
    Marchenko-Pastur law, which removes the small-sample bias of a smallest eigenvalue. A
    speckle pattern blurred by the optics has almost no power in some directions of block space
    (high spatial frequencies in every direction at once), while white noise adds its variance
    equally in all of them, so the smallest eigenvalue is the noise variance. Unlike the
    original method no low-texture blocks are selected: a speckle image is textured
    everywhere. Blocks touching clipped pixels (a grey level piled up at the image's maximum
    or minimum) are left out, since clipping removes the noise there. At most ``max_blocks``
    blocks (a regular subsample) enter the covariance.

    Parameters
    ----------
    image : ndarray or path
        Grey (or colour, converted to luminance) image.
    roi : optional
        Region to use (anything :func:`dic.images.roi.make_roi` accepts); only blocks wholly inside
        it count. Default: the whole image.
    block : int, optional
        Block side in px (3 to 9). Larger blocks separate the pattern from the noise better
        (a sharp, high-contrast pattern leaks into the smallest eigenvalue of 5 x 5 blocks).
    max_blocks : int, optional
        At most about this many blocks (a regular subsample) enter the covariance; fewer are
        faster and scatter a little more (a few per cent at 4,000).

    Returns
    -------
    float
        Noise standard deviation in grey levels (0 for a blank image; NaN if fewer than
        ``10 * block**2`` blocks are usable).

    Notes
    -----
    Accuracy: for white Gaussian noise on a smooth pattern the estimate is within a few per
    cent of the true value.
    A pattern with detail down to the pixel in all directions at once (speckles under about
    2 px, or strong aliasing) leaves some of its own power in the smallest eigenvalue and the
    estimate comes out high; such a pattern is "too fine" anyway. Signal-dependent (photon)
    noise is averaged over the grey levels present. Rounding to integers is part of the noise
    (variance 1/12 grey level squared).

    References
    ----------
    .. [1] S. Pyatykh, J. Hesser, L. Zheng, "Image noise level estimation by principal
       component analysis", IEEE Trans. Image Process. 22 (2013) 687-699.
    .. [2] V. A. Marchenko, L. A. Pastur, "Distribution of eigenvalues for some sets of random
       matrices", Math. USSR-Sbornik 1 (1967) 457-483.
    """
    from numpy.lib.stride_tricks import sliding_window_view

    img = _as_image(image, "image")
    if isinstance(block, bool) or not isinstance(block, (int, np.integer)) or not 3 <= block <= 9:
        raise ValueError(f"block must be an integer from 3 to 9, got {block!r}; e.g. 5")
    mask = _region(img.shape, roi)
    if np.ptp(img if mask is None else img[mask]) == 0:
        return 0.0                                      # a blank image holds no noise
    bad = _clipped(img)
    if mask is not None:
        bad |= ~mask
    if img.shape[0] < block or img.shape[1] < block:
        return float("nan")
    # a block is usable when none of its pixels is bad: box sum of the bad mask == 0
    usable = _box_sum(bad, block) == 0
    n = int(usable.sum())
    if n < 10 * block * block:
        return float("nan")
    stride = max(1, int(np.ceil(np.sqrt(n / max(int(max_blocks), 1)))))
    blocks = sliding_window_view(img, (block, block))[::stride, ::stride]
    keep = usable[::stride, ::stride]
    X = blocks[keep].reshape(-1, block * block)
    X = X - X.mean(axis=0)
    cov = X.T @ X / max(X.shape[0] - 1, 1)
    lam = np.linalg.eigvalsh(cov)[0]
    # the smallest eigenvalue of a sample covariance of n white-noise vectors of dimension d
    # sits near the lower edge of the Marchenko-Pastur law, s^2 (1 - sqrt(d / n))^2
    edge = (1.0 - np.sqrt(X.shape[1] / X.shape[0])) ** 2
    return float(np.sqrt(max(lam, 0.0) / edge))


def pair_noise(first, second, *, roi=None) -> float:
    """Noise standard deviation of one image from two images of a static scene.

    ``std(first - second) / sqrt(2)`` over the region, after removing the mean difference (a
    uniform change of lighting). Valid only when nothing moved between the two images and the
    lighting stayed the same; the estimate includes every source of grey-level scatter between
    the two exposures (sensor noise, rounding, flicker).

    Parameters
    ----------
    first, second : ndarray or path
        Two images of the same size.
    roi : optional
        Region to use (see :func:`dic.images.roi.make_roi`); default the whole image.

    Returns
    -------
    float
        Noise standard deviation of one image, grey levels.

    Raises
    ------
    ValueError
        Images of different sizes.

    References
    ----------
    .. [1] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1 (noise from repeated static images).
    """
    a = _as_image(first, "first image")
    b = _as_image(second, "second image")
    if a.shape != b.shape:
        raise ValueError(f"the two images differ in size ({a.shape[1]} x {a.shape[0]} vs "
                         f"{b.shape[1]} x {b.shape[0]} px); use two images from the same camera")
    d = a - b
    mask = _region(a.shape, roi)
    keep = ~(_clipped(a) | _clipped(b))
    if mask is not None:
        keep &= mask
    if keep.sum() < 2:
        return float("nan")
    return float(np.std(d[keep], ddof=1) / np.sqrt(2.0))
