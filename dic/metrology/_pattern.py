"""Speckle-pattern quality from one reference image: the numbers and a short verdict."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from dic.errors import RegionTooSmall

__all__ = ["pattern_quality", "PatternQuality", "speckle_size", "mean_intensity_gradient",
           "sssig_maps", "CANDIDATE_SUBSETS", "find_speckled_region"]

#: subset sizes for which the displacement noise is predicted
CANDIDATE_SUBSETS = (11, 15, 21, 25, 31, 41, 51)
#: at most this many sample points per candidate subset in the noise prediction
_MAX_POINTS = 1500

# Verdict limits. Speckle size and speckles per subset: the iDICs Good Practices Guide (2018)
# recommends speckles of at least 3 px and at least 3 speckles across a subset (from memory).
# The others are common practice, no source.
TOO_FINE_PX = 3.0
SPECKLES_PER_SUBSET = 3.0
LOW_HISTOGRAM_USE = 0.25
SATURATED_LIMIT = 0.005
DARK_LIMIT = 0.05
NOISY_PX = (0.02, 0.05)           # predicted displacement noise: fair above, poor above
GRADIENT_NOISE_LIMIT = 0.1        # c s^2 / mean squared gradient above which the prediction is low


def _full_scale(img, bits):
    """(bits, full-scale grey level): given, or the smallest usual camera depth holding the data."""
    if bits is not None:
        if isinstance(bits, bool) or not isinstance(bits, (int, np.integer)) or not 1 <= bits <= 16:
            raise ValueError(f"bits must be an integer from 1 to 16, got {bits!r}; e.g. 12")
        return int(bits), float(2 ** int(bits) - 1)
    top = float(np.max(img)) if img.size else 0.0
    if top <= 1.0 and not np.all(img == np.round(img)):
        return 0, 1.0                                   # a float image scaled to 0..1
    for b in (8, 10, 12, 14, 16):
        if top <= 2 ** b - 1:
            return b, float(2 ** b - 1)
    return 0, top


def mean_intensity_gradient(image, mask=None) -> float:
    """Mean length of the grey-level gradient, central differences (Pan, Lu & Xie 2010).

    Parameters
    ----------
    image : ndarray
    mask : ndarray of bool, optional
        Pixels to average over.

    Returns
    -------
    float
        Grey levels per px.

    References
    ----------
    .. [1] B. Pan, Z. Lu, H. Xie, "Mean intensity gradient: an effective global parameter for
       quality assessment of the speckle patterns used in digital image correlation", Opt.
       Lasers Eng. 48 (2010) 469-477.
    """
    gy, gx = np.gradient(np.asarray(image, dtype=np.float64))
    mag = np.hypot(gx, gy)
    return float(np.mean(mag if mask is None else mag[mask]))


def sssig_maps(image, subset: int):
    """Sum of squared subset intensity gradients along x and y, for every subset centre.

    Central differences, summed over the ``subset x subset`` window centred on each pixel
    (Pan et al. 2008); NaN where the window leaves the image.

    Parameters
    ----------
    image : ndarray
    subset : int
        Odd subset size.

    Returns
    -------
    sssig_x, sssig_y : ndarray
        Same shape as the image, grey levels squared.

    References
    ----------
    .. [1] B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, "Study on subset size selection in
       digital image correlation for speckle patterns", Opt. Express 16 (2008) 7037-7048.
    """
    from scipy.ndimage import uniform_filter

    img = np.asarray(image, dtype=np.float64)
    gy, gx = np.gradient(img)
    n = int(subset)
    h = n // 2
    out = []
    for g in (gx, gy):
        s = uniform_filter(g * g, n, mode="constant") * (n * n)
        s[:h] = s[-h:] = np.nan
        s[:, :h] = s[:, -h:] = np.nan
        out.append(s)
    return out[0], out[1]


def speckle_size(image, mask=None, noise: float = 0.0):
    """Speckle size from the width of the image's autocorrelation.

    The autocovariance of the grey levels (mean removed, over the mask; normalised per lag by
    the number of overlapping pixels, via FFTs with zero padding) is taken at lags along x and
    along y; its half width at half maximum ``w`` is found in each direction, with the white
    noise's contribution ``noise**2`` removed from the zero lag. The speckle size is
    ``sqrt(2) w``: the full width at half maximum of one Gaussian speckle that gives this
    autocorrelation (a Gaussian blob of FWHM ``d`` has an autocorrelation of FWHM
    ``sqrt(2) d``, and randomly placed blobs add their autocorrelations, Campbell's theorem).

    Parameters
    ----------
    image : ndarray
    mask : ndarray of bool, optional
    noise : float
        Image noise standard deviation, grey levels.

    Returns
    -------
    size : float
        Speckle size in px (NaN for a blank image).
    size_xy : (float, float)
        Along x and y.

    References
    ----------
    .. [1] P. L. Reu, "All about speckles: speckle size measurement", Exp. Tech. 38(6) (2014)
       1-2 (autocorrelation width as the speckle size; from memory).
    """
    from scipy import fft

    img = np.asarray(image, dtype=np.float64)
    m = np.ones(img.shape, bool) if mask is None else np.asarray(mask, bool)
    if m.sum() < 16:
        return float("nan"), (float("nan"), float("nan"))
    f = np.where(m, img - img[m].mean(), 0.0)
    shape = [fft.next_fast_len(2 * s) for s in img.shape]
    F = fft.rfft2(f, shape)
    M = fft.rfft2(m.astype(np.float64), shape)
    acov = fft.irfft2(F * np.conj(F), shape)
    count = np.rint(fft.irfft2(M * np.conj(M), shape))
    maxlag = min(64, img.shape[0] // 2, img.shape[1] // 2)
    widths = []
    for line, cnt in ((acov[0, :maxlag + 1], count[0, :maxlag + 1]),
                      (acov[:maxlag + 1, 0], count[:maxlag + 1, 0])):
        with np.errstate(invalid="ignore", divide="ignore"):
            c = np.where(cnt > 0, line / np.maximum(cnt, 1), np.nan)
        c0 = c[0] - float(noise) ** 2
        if not (np.isfinite(c0) and c0 > 0):
            widths.append(float("nan"))
            continue
        r = c / c0
        below = np.flatnonzero(r[1:] < 0.5)
        if below.size == 0:
            widths.append(float("nan"))
            continue
        j = int(below[0]) + 1
        widths.append(j - 1 + (r[j - 1] - 0.5) / (r[j - 1] - r[j]) if j > 1 else
                      (1.0 - 0.5) / (1.0 - r[1]))
    sx, sy = (math.sqrt(2.0) * w for w in widths)
    size = float(np.nanmean([sx, sy])) if np.isfinite([sx, sy]).any() else float("nan")
    return size, (float(sx), float(sy))


@dataclass
class PatternQuality:
    """Quality numbers of a speckle pattern and a short verdict.

    Attributes
    ----------
    verdict : str
        ``"good"``, ``"fair"`` (usable, with the reasons as cautions) or ``"poor"``.
    reasons : list of str
        Plain-words reasons for anything short of good (empty when good).
    mean_gradient : float
        Mean intensity gradient, grey levels/px (Pan, Lu & Xie 2010).
    subset : int
        The subset size of the SSSIG maps.
    sssig_x, sssig_y : ndarray
        SSSIG maps for that subset (Pan et al. 2008), grey levels squared; NaN near the border.
    sssig_min : float
        Smallest SSSIG (x or y) over the ROI's subset centres: the weakest subset.
    speckle_size : float
        Speckle size, px (autocorrelation width, see :func:`speckle_size`); ``speckle_size_xy``
        along x and y.
    bits, full_scale : int, float
        Bit depth used for the grey-level range (given or inferred) and its top grey level.
    histogram_use : float
        Share of the full grey-level range spanned by the central 99 % of the ROI's pixels.
    saturated_fraction, dark_fraction : float
        Share of ROI pixels at the top grey level, and at or below 1 % of full scale.
    noise : float
        Image noise standard deviation, grey levels; ``noise_source`` says how it was found.
    predicted_noise : dict
        ``{subset: (sd_u, sd_v)}``: predicted displacement noise (px) of matching this pattern
        against another image with the same noise, per candidate subset size (root mean square
        over the ROI of :func:`dic.metrology.point_sigma`, affine subsets).
    gradient_noise_ratio : float
        ``c noise^2 / mean squared gradient``: above 0.1 the prediction comes out low.
    """

    verdict: str
    reasons: list
    mean_gradient: float
    subset: int
    sssig_x: np.ndarray
    sssig_y: np.ndarray
    sssig_min: float
    speckle_size: float
    speckle_size_xy: tuple
    bits: int
    full_scale: float
    histogram_use: float
    saturated_fraction: float
    dark_fraction: float
    noise: float
    noise_source: str
    predicted_noise: dict
    gradient_noise_ratio: float

    def summary(self) -> str:
        """A few lines of plain text."""
        bits = f"{self.bits}-bit" if self.bits else f"full scale {self.full_scale:g}"
        lines = [
            f"pattern: {self.verdict}" + (": " + "; ".join(self.reasons) if self.reasons else ""),
            f"  speckle size {self.speckle_size:.1f} px (x {self.speckle_size_xy[0]:.1f}, "
            f"y {self.speckle_size_xy[1]:.1f}); mean intensity gradient "
            f"{self.mean_gradient:.1f} grey levels/px",
            f"  grey levels ({bits}): {100 * self.histogram_use:.0f} % of the range used, "
            f"{100 * self.saturated_fraction:.2f} % saturated, {100 * self.dark_fraction:.2f} % "
            f"near black",
            f"  image noise {self.noise:.2f} grey levels ({self.noise_source}); weakest subset "
            f"of {self.subset} px: SSSIG {self.sssig_min:.3g}",
            "  predicted displacement noise (px) by subset size: " + ", ".join(
                f"{s}: {max(v):.4f}" if np.isfinite(max(v)) else f"{s}: -"
                for s, v in self.predicted_noise.items()),
        ]
        return "\n".join(lines)

    def as_dict(self) -> dict:
        """The scalar results (maps left out), for reports and files."""
        return {
            "verdict": self.verdict, "reasons": list(self.reasons),
            "mean_gradient": self.mean_gradient, "subset": self.subset,
            "sssig_min": self.sssig_min, "speckle_size": self.speckle_size,
            "speckle_size_xy": list(self.speckle_size_xy), "bits": self.bits,
            "full_scale": self.full_scale, "histogram_use": self.histogram_use,
            "saturated_fraction": self.saturated_fraction, "dark_fraction": self.dark_fraction,
            "noise": self.noise, "noise_source": self.noise_source,
            "predicted_noise": {int(k): [float(a) for a in v]
                                for k, v in self.predicted_noise.items()},
            "gradient_noise_ratio": self.gradient_noise_ratio,
        }


def find_speckled_region(image, size: int = 21):
    """The painted (speckled) part of an image, told apart from a plain background.

    The local grey-level variance over ``size`` x ``size`` windows of the lightly smoothed
    image is split into textured and plain by Otsu's threshold on its logarithm; the largest
    textured patch, holes filled and shrunk by half a window (the windows reach that far
    beyond the paint), is the region.

    Parameters
    ----------
    image : array_like
        Grey-level image.
    size : int, optional
        Window size in px (about a subset).

    Returns
    -------
    ndarray of bool or None
        The region's mask; None when the image is textured nearly everywhere (no background to
        leave out) or nowhere (nothing to find).

    References
    ----------
    .. [1] N. Otsu, A threshold selection method from gray-level histograms, IEEE Trans. Syst.
       Man Cybern. 9 (1979) 62-66.
    """
    from scipy import ndimage
    from skimage.filters import threshold_otsu

    img = np.asarray(image, dtype=np.float64)
    if img.ndim != 2 or min(img.shape) < 2 * size:
        return None
    smooth = ndimage.gaussian_filter(img, 1.0)
    mean = ndimage.uniform_filter(smooth, size)
    var = np.maximum(ndimage.uniform_filter(smooth * smooth, size) - mean * mean, 0.0)
    level = np.log(var + 1e-6 * (float(np.ptp(img)) + 1.0) ** 2)
    if not np.ptp(level) > 0:
        return None
    textured = level > threshold_otsu(level)
    # a real split: the textured part's variance well above the plain part's (a factor of 10,
    # common practice, no source)
    if textured.all() or not textured.any() or (
            np.median(var[textured]) < 10.0 * np.median(var[~textured])):
        return None
    labels, n = ndimage.label(textured)
    sizes = ndimage.sum_labels(textured, labels, index=np.arange(1, n + 1))
    region = ndimage.binary_fill_holes(labels == int(np.argmax(sizes)) + 1)
    region = ndimage.binary_erosion(region, np.ones((3, 3), bool), iterations=size // 2,
                                    border_value=1)
    share = region.mean()
    if share > 0.95 or share < 0.02:
        return None
    return region


def _worse(a, b):
    order = {"good": 0, "fair": 1, "poor": 2}
    return a if order[a] >= order[b] else b


def pattern_quality(image, *, subset: int = 21, noise=None, second_image=None, roi=None,
                    bits=None, subsets=CANDIDATE_SUBSETS,
                    interpolation: str = "quintic") -> PatternQuality:
    """Quality of a speckle pattern for subset matching, from its reference image.

    Parameters
    ----------
    image : ndarray or path
        The reference image.
    subset : int
        Subset size for the SSSIG maps and the verdict.
    noise : float, optional
        Image noise standard deviation (grey levels). Default: from ``second_image`` when
        given (:func:`dic.metrology.pair_noise`), else estimated from ``image`` alone
        (:func:`dic.metrology.image_noise`).
    second_image : ndarray or path, optional
        A second image of the static, unloaded specimen, for the noise.
    roi : optional
        Region of interest (see :func:`dic.images.roi.make_roi`).
    bits : int, optional
        Camera bit depth (e.g. 12 for 12-bit values stored in 16-bit files); inferred from the
        largest grey level when omitted.
    subsets : sequence of int
        Candidate subset sizes for the predicted displacement noise.
    interpolation : {"cubic", "quintic"}
        The matcher's interpolation, whose gradients the prediction uses.

    Returns
    -------
    PatternQuality
        A blank or saturated image gives a "poor" verdict with its reason, not an error.

    Raises
    ------
    ValueError
        Bad arguments, or ``second_image`` of a different size.

    References
    ----------
    .. [1] B. Pan, Z. Lu, H. Xie, Opt. Lasers Eng. 48 (2010) 469-477 (mean intensity gradient).
    .. [2] B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, Opt. Express 16 (2008) 7037-7048 (SSSIG).
    .. [3] S. Pyatykh, J. Hesser, L. Zheng, IEEE Trans. Image Process. 22 (2013) 687-699
       (noise from one image).
    .. [4] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1.
    """
    from dic.images.io import read_image
    from dic.images.roi import make_roi
    from dic.matching import gradient_noise_gain, image_noise, pair_noise, predicted_sigma

    img = read_image(image, name="image")
    if isinstance(subset, bool) or not isinstance(subset, (int, np.integer)) or subset < 7 \
            or subset % 2 == 0:
        raise ValueError(f"subset must be an odd integer of at least 7, got {subset!r}; e.g. 21")
    subsets = sorted({int(s) for s in subsets} | {int(subset)})
    if any(s < 7 or s % 2 == 0 for s in subsets):
        raise ValueError(f"subsets must be odd integers of at least 7, got {subsets}")
    mask = make_roi(roi, img.shape)
    pix = img[mask]
    order = {"cubic": 3, "quintic": 5}.get(str(interpolation).lower())
    if order is None:
        raise ValueError(f"unknown interpolation {interpolation!r}; use 'cubic' or 'quintic'")

    # noise
    if noise is not None:
        sigma = float(noise)
        if not (math.isfinite(sigma) and sigma >= 0):
            raise ValueError(f"noise must be a non-negative number of grey levels, got {noise!r}")
        source = "given"
    elif second_image is not None:
        other = read_image(second_image, name="second_image")
        if other.shape != img.shape:
            raise ValueError(f"second_image is {other.shape[1]} x {other.shape[0]} px, image is "
                             f"{img.shape[1]} x {img.shape[0]} px; use two images of the same "
                             f"camera")
        sigma, source = pair_noise(img, other, roi=mask), "from two static images"
    else:
        sigma, source = image_noise(img, roi=mask), "estimated from the image"
    if not math.isfinite(sigma):
        sigma, source = image_noise(img), "estimated from the whole image"
    sigma = float(sigma) if math.isfinite(sigma) else 0.0

    # grey levels
    b, top = _full_scale(img, bits)
    lo, hi = np.percentile(pix, [0.5, 99.5])
    hist_use = float((hi - lo) / top) if top > 0 else 0.0
    saturated = float(np.mean(pix >= top)) if top > 0 else 0.0
    dark = float(np.mean(pix <= 0.01 * top))

    # gradients, SSSIG, speckle size
    mig = mean_intensity_gradient(img, mask)
    ssx, ssy = sssig_maps(img, subset)
    from dic.images.roi import erode_for_subset

    centres = erode_for_subset(mask, subset) & np.isfinite(ssx)
    sssig_min = float(np.min(np.minimum(ssx, ssy)[centres])) if centres.any() else float("nan")
    # the speckle size from the ROI's bounding box, its central 1024 x 1024 px at most
    from dic.images.roi import roi_bbox

    x0, y0, x1, y1 = roi_bbox(mask)
    if y1 - y0 >= 1024:
        y0 = (y0 + y1 - 1023) // 2
        y1 = y0 + 1023
    if x1 - x0 >= 1024:
        x0 = (x0 + x1 - 1023) // 2
        x1 = x0 + 1023
    box = np.s_[y0:y1 + 1, x0:x1 + 1]
    size, size_xy = speckle_size(img[box], mask[box], sigma)
    from dic.images import interp

    gxs, gys = interp.image_gradients(img, order)
    msq = float(np.mean((gxs ** 2 + gys ** 2)[mask]) / 2.0)
    # the noise's own share of the squared gradient is removed before comparing
    msq_pattern = msq - gradient_noise_gain(order) * sigma ** 2
    blank = not (msq_pattern > 0 and np.ptp(pix) > 0)
    gn_ratio = (gradient_noise_gain(order) * sigma ** 2 / msq_pattern if not blank
                else float("inf"))

    # predicted displacement noise per candidate subset
    predicted = {}
    for s in subsets:
        val = (float("nan"), float("nan"))
        if not blank:
            try:
                h = s // 2
                area = max(int(erode_for_subset(mask, s).sum()), 1)
                step = max(h, int(math.ceil(math.sqrt(area / _MAX_POINTS))))
                su, sv, _x, _y = predicted_sigma(img, s, sigma, step=step, roi=mask,
                                                 interpolation=interpolation,
                                                 _gradients=(gxs, gys))
                if np.isfinite(su).any():
                    val = (float(np.sqrt(np.nanmean(su ** 2))),
                           float(np.sqrt(np.nanmean(sv ** 2))))
            except RegionTooSmall:
                pass                               # the ROI is too small for this subset
        predicted[s] = val

    # verdict
    verdict, reasons = "good", []
    if blank:
        verdict = "poor"
        reasons.append("no usable texture: the image is blank or uniform"
                       + (" (saturated)" if saturated > 0.5 else ""))
    if saturated > SATURATED_LIMIT:
        verdict = _worse(verdict, "poor" if saturated > 0.05 else "fair")
        reasons.append(f"saturation: {100 * saturated:.1f} % of the pixels at full scale; "
                       f"reduce exposure or lighting")
    if dark > DARK_LIMIT and not blank:
        verdict = _worse(verdict, "fair")
        reasons.append(f"under-exposed: {100 * dark:.1f} % of the pixels near black")
    if not blank:
        if hist_use < LOW_HISTOGRAM_USE:
            verdict = _worse(verdict, "poor" if hist_use < 0.1 else "fair")
            reasons.append(f"low contrast: the pattern spans only {100 * hist_use:.0f} % of the "
                           f"grey-level range")
        if math.isfinite(size) and size < TOO_FINE_PX:
            verdict = _worse(verdict, "poor" if size < 2.0 else "fair")
            reasons.append(f"too fine: speckles of {size:.1f} px (under {TOO_FINE_PX:g} px "
                           f"they alias)")
        if math.isfinite(size) and size > subset / SPECKLES_PER_SUBSET:
            verdict = _worse(verdict, "fair")
            reasons.append(f"too coarse for a {subset} px subset: speckles of {size:.1f} px, "
                           f"fewer than {SPECKLES_PER_SUBSET:g} across; use a subset of at "
                           f"least {int(2 * math.ceil(SPECKLES_PER_SUBSET * size / 2) + 1)} px")
        sd = max(predicted.get(subset, (float("nan"),) * 2))
        if not math.isfinite(sd):
            verdict = _worse(verdict, "poor")
            reasons.append(f"too little texture for a {subset} px subset")
        elif sd > NOISY_PX[0]:
            verdict = _worse(verdict, "poor" if sd > NOISY_PX[1] else "fair")
            reasons.append(f"low contrast against the noise: predicted displacement noise "
                           f"{sd:.3f} px with a {subset} px subset")
        if gn_ratio > GRADIENT_NOISE_LIMIT:
            verdict = _worse(verdict, "fair")
            reasons.append("faint or coarse pattern: the image noise is strong against the "
                           "pattern's gradients, the predicted noise is optimistic")
    return PatternQuality(
        verdict=verdict, reasons=reasons, mean_gradient=mig, subset=int(subset),
        sssig_x=ssx, sssig_y=ssy, sssig_min=sssig_min, speckle_size=size,
        speckle_size_xy=size_xy, bits=b, full_scale=top, histogram_use=hist_use,
        saturated_fraction=saturated, dark_fraction=dark, noise=sigma, noise_source=source,
        predicted_noise=predicted, gradient_noise_ratio=float(gn_ratio))
