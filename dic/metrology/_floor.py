"""Noise floor from a set of images of the unloaded specimen (iDICs 2018)."""

from __future__ import annotations

import os
import logging
from dataclasses import dataclass, field as dc_field

import numpy as np

from dic.errors import InputError
from dic.metrology._rows import Row, microstrain, pixels
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["noise_floor", "NoiseFloor", "COMPONENTS"]

log = logging.getLogger(__name__)

#: spatial scatter of u or v above this many times the predicted noise means motion, not noise
MOTION_FACTOR = 10.0

#: the quantities whose noise is reported (xy is tensor shear)
COMPONENTS = ("u", "v", "xx", "yy", "xy")


def _resolve(images):
    """A list of arrays or paths from a list, a folder or a glob pattern."""
    from dic.images.io import list_images

    if isinstance(images, (str, os.PathLike)):
        items = list(list_images(images))
    elif isinstance(images, np.ndarray) and images.ndim == 2:
        items = [images]
    else:
        try:
            items = list(images)
        except TypeError:
            raise ValueError(f"images must be a list of images, a folder or a glob pattern, got "
                             f"{type(images).__name__}") from None
    if len(items) < 2:
        raise ValueError(f"images: a noise floor needs at least two images of the unloaded, "
                         f"static specimen (the first is the reference), got {len(items)}; take "
                         f"a few images before loading")
    return items


@dataclass
class NoiseFloor:
    """Noise of displacement and strain measured on images of the unloaded specimen.

    Every image after the first is matched against the first; nothing moved, so every
    non-zero value is error.

    Attributes
    ----------
    n_images : int
        Images used (the first is the reference).
    settings : dict
        subset, step, window, measure, vsg, shape_function, interpolation.
    spatial : dict
        For ``u``, ``v`` (px) and ``xx``, ``yy``, ``xy`` (strain, tensor shear): the spatial
        standard deviation over the ROI, averaged over the images.
    spatial_each : dict
        The same per image, arrays of length ``n_images - 1``.
    mean : dict
        Mean over the ROI, averaged over the images (a rigid drift shows in u, v).
    temporal : dict or None
        Per point, the standard deviation over the images (maps of the grid shape, NaN where a
        point was not measured in every image); None with fewer than three images (one field
        has no temporal scatter).
    temporal_rms : dict or None
        Root mean square of each temporal map over its points.
    predicted : (float, float)
        Root mean square of the per-point predicted ``std_u``, ``std_v`` (px) of the
        fields, to set against ``spatial["u"]``, ``spatial["v"]``.
    n_points : int
        Grid points measured in every image.
    x, y : ndarray
        Grid positions, px.
    """

    n_images: int
    settings: dict
    spatial: dict
    spatial_each: dict
    mean: dict
    temporal: dict | None
    temporal_rms: dict | None
    predicted: tuple
    n_points: int
    x: np.ndarray
    y: np.ndarray
    warnings: list = dc_field(default_factory=list)

    def summary(self) -> str:
        """A few lines of plain text for a report."""
        s = self.settings
        sp = self.spatial
        lines = [
            f"noise floor from {self.n_images} images of the unloaded specimen (subset "
            f"{s['subset']} px, step {s['step']} px, strain window {s['window']} points, "
            f"VSG {s['vsg']:.0f} px, {s['measure']} strain):",
            f"  spatial standard deviation: u {sp['u']:.4f} px, v {sp['v']:.4f} px; xx "
            f"{sp['xx'] * 1e6:.0f}, yy {sp['yy'] * 1e6:.0f}, xy (tensor shear) "
            f"{sp['xy'] * 1e6:.0f} microstrain",
            f"  predicted from the subsets: u {self.predicted[0]:.4f} px, v "
            f"{self.predicted[1]:.4f} px",
        ]
        if self.temporal_rms is not None:
            t = self.temporal_rms
            lines.append(f"  temporal standard deviation (RMS over points): u {t['u']:.4f} px, "
                         f"v {t['v']:.4f} px; xx {t['xx'] * 1e6:.0f}, yy {t['yy'] * 1e6:.0f}, "
                         f"xy {t['xy'] * 1e6:.0f} microstrain")
        else:
            lines.append("  temporal standard deviation: needs at least three images")
        lines.extend(f"  warning: {w}" for w in self.warnings)
        return "\n".join(lines)

    #: what the result is called in a report
    TITLE = "Noise floor"
    #: the method, named once wherever the rows are shown
    METHOD = ("Images of the unloaded specimen were matched against the first of them: nothing "
              "moved, so every displacement and strain measured is error (the noise-floor "
              "test of the iDICs Good Practices Guide, 2018).")

    def report_rows(self, scale=None):
        """The results as rows a person reads: name, value with unit, what it means.

        Parameters
        ----------
        scale : float, optional
            mm per px, to give lengths in mm too.

        Returns
        -------
        list of Row
        """
        sp = self.spatial
        rows = [
            Row("Images of the unloaded specimen", f"{self.n_images}",
                "Static images matched against the first; the first is the reference."),
            Row("Displacement noise floor", f"u {pixels(sp['u'], 2, scale)}, "
                                            f"v {pixels(sp['v'], 2, scale)}",
                "Scatter of the displacement over the region, averaged over the images.",
                "displacement noise"),
            Row("Strain noise floor", f"xx {microstrain(sp['xx'])}, yy {microstrain(sp['yy'])}, "
                                      f"xy {microstrain(sp['xy'])}",
                "Scatter of the strain over the region (xy is tensor shear): strains smaller "
                "than this are not resolved.", "strain noise"),
            Row("Displacement noise predicted", f"u {pixels(self.predicted[0], 2, scale)}, "
                                                f"v {pixels(self.predicted[1], 2, scale)}",
                "The same, predicted from each subset's pattern and the image noise."),
        ]
        if self.temporal_rms is not None:
            t = self.temporal_rms
            rows.append(Row("Scatter over time", f"u {pixels(t['u'], 2, scale)}, "
                                                 f"v {pixels(t['v'], 2, scale)}; "
                                                 f"xx {microstrain(t['xx'])}",
                            "Per point, the scatter from image to image (root mean square "
                            "over the points)."))
        return rows

    def as_dict(self) -> dict:
        """Scalars only (maps left out), for reports and files."""
        return {"n_images": self.n_images, "settings": dict(self.settings),
                "spatial": dict(self.spatial), "mean": dict(self.mean),
                "temporal_rms": None if self.temporal_rms is None else dict(self.temporal_rms),
                "predicted": list(self.predicted), "n_points": self.n_points}


def noise_floor(images, *, subset: int = 21, step: int = 10, window: int = DEFAULT_WINDOW,
                roi=None, measure: str = DEFAULT_MEASURE, shape_function: str = "affine",
                interpolation: str = "quintic", image_noise=None) -> NoiseFloor:
    """Noise floor of displacement and strain from images of the unloaded specimen.

    Parameters
    ----------
    images : list of arrays or paths, folder or glob pattern
        At least two images of the static, unloaded specimen taken as in the test; the first
        is the reference. Three or more also give the temporal scatter per point.
    subset, step, window : int
        Settings, as for :func:`dic.correlate` and :func:`dic.strain_field`.
    roi : optional
        Region of interest (see :func:`dic.images.roi.make_roi`).
    measure : str
        Strain measure.
    shape_function, interpolation : str
        As for :func:`dic.correlate`.
    image_noise : float, optional
        Passed to :func:`dic.correlate` for the predicted per-point uncertainty.

    Returns
    -------
    NoiseFloor

    Raises
    ------
    ValueError
        Fewer than two images, images of different sizes, or settings the matcher refuses.
    OSError
        An image file cannot be read.

    References
    ----------
    .. [1] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1 (noise floor: spatial and temporal
       standard deviations on static images).
    """
    from dic.images.io import read_image
    from dic.matching import correlate
    from dic.strain import canonical_measure, strain_field

    items = _resolve(images)
    measure = canonical_measure(measure)
    ref = read_image(items[0], name="images[0]")
    fields, strains = [], []
    for k, item in enumerate(items[1:], start=1):
        img = read_image(item, name=f"images[{k}]")
        if img.shape != ref.shape:
            raise ValueError(f"images[{k}] is {img.shape[1]} x {img.shape[0]} px but images[0] "
                             f"is {ref.shape[1]} x {ref.shape[0]} px; use images of one camera "
                             f"and size")
        if np.array_equal(img, ref):
            shown = f" ('{item}')" if isinstance(item, (str, os.PathLike)) else ""
            raise InputError(f"images[{k}]{shown} has exactly the pixels of images[0]: the same "
                             f"image twice shows no noise (camera noise differs from shot to "
                             f"shot); give separate images of the static specimen")
        f = correlate(ref, img, subset=subset, step=step, roi=roi,
                      shape_function=shape_function, interpolation=interpolation,
                      image_noise=image_noise)
        fields.append(f)
        strains.append(strain_field(f, window=window, measure=measure))
    f0 = fields[0]
    n = len(fields)

    def values(k, c):
        f, e = fields[k], strains[k]
        if c in ("u", "v"):
            return np.where(f.valid, getattr(f, c), np.nan)
        return np.where(e.valid, getattr(e, c), np.nan)

    spatial_each, mean = {}, {}
    for c in COMPONENTS:
        sd, mu = [], []
        for k in range(n):
            a = values(k, c)
            a = a[np.isfinite(a)]
            sd.append(float(np.std(a)) if a.size > 1 else float("nan"))
            mu.append(float(np.mean(a)) if a.size else float("nan"))
        spatial_each[c] = np.array(sd)
        mean[c] = float(np.nanmean(mu)) if np.isfinite(mu).any() else float("nan")
    spatial = {c: float(np.nanmean(v)) if np.isfinite(v).any() else float("nan")
               for c, v in spatial_each.items()}
    temporal = temporal_rms = None
    if n >= 2:
        temporal, temporal_rms = {}, {}
        for c in COMPONENTS:
            stack = np.stack([values(k, c) for k in range(n)])
            every = np.all(np.isfinite(stack), axis=0)
            t = np.full(stack.shape[1:], np.nan)
            t[every] = np.std(stack[:, every], axis=0, ddof=1)
            temporal[c] = t
            temporal_rms[c] = (float(np.sqrt(np.mean(t[every] ** 2))) if every.any()
                               else float("nan"))
    su = np.concatenate([f.std_u[f.valid] for f in fields if f.std_u is not None])
    sv = np.concatenate([f.std_v[f.valid] for f in fields if f.std_v is not None])
    predicted = (float(np.sqrt(np.nanmean(su ** 2))) if su.size else float("nan"),
                 float(np.sqrt(np.nanmean(sv ** 2))) if sv.size else float("nan"))
    warnings = []
    for c, pred in zip(("u", "v"), predicted):
        # not static: a deformation or a non-rigid motion scatters u, v far beyond the noise
        # the subsets predict (common practice, no source: a noise floor needs static images)
        if np.isfinite(pred) and pred > 0 and spatial[c] > MOTION_FACTOR * pred:
            warnings.append(f"the scatter of {c} ({spatial[c]:.4f} px) is "
                            f"{spatial[c] / pred:.0f} times the predicted noise: the specimen "
                            f"seems to move or deform between the images, which then measure "
                            f"motion, not noise; use images of the static, unloaded specimen")
            break
    for w in warnings:
        log.warning("%s", w)
    all_valid = np.all([f.valid for f in fields], axis=0)
    vsg = (window - 1) * step + subset
    return NoiseFloor(
        n_images=n + 1,
        settings={"subset": subset, "step": step, "window": window, "measure": measure,
                  "vsg": vsg, "shape_function": f0.settings.get("shape_function"),
                  "interpolation": f0.settings.get("interpolation")},
        spatial=spatial, spatial_each=spatial_each, mean=mean, temporal=temporal,
        temporal_rms=temporal_rms, predicted=predicted, n_points=int(all_valid.sum()),
        x=f0.x, y=f0.y, warnings=warnings)

