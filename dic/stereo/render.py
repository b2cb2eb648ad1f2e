"""Exact images of a speckled surface and of chessboard targets seen through posed cameras.

For tests and the sample. For every pixel the camera's ray (distortion inverted to rounding,
:func:`dic.stereo.undistort.undistort_points`) is intersected with the specimen surface in its
deformed state; the hit is mapped back to the surface's material coordinates ``(s1, s2)`` (mm on
the reference surface), where the analytic speckle of :mod:`dic.images.synth` is evaluated. No
stored image is interpolated. Speckle pixels are point samples at the pixel centres, as in
:func:`dic.images.synth.render`; chessboard pixels are averaged over a square of sub-samples
where an edge passes, so the targets are anti-aliased.

Surfaces
--------
:class:`Plate`
    A flat plate: material point ``s`` sits at ``origin + E @ (F s)`` where ``E`` holds the
    plate's in-plane axes (first two columns of ``rotation``) and ``F`` is a homogeneous in-plane
    deformation gradient.
:class:`Cylinder`
    A circular cylinder: material point ``(s1, s2)`` (axial length, arc length on the reference
    radius) sits at axial position ``axial_stretch * s1`` and angle ``s2 / radius`` on the radius
    ``hoop_stretch * radius``.

References
----------
.. [1] P. Zhou and K. E. Goodson, Opt. Eng. 40(8) (2001) 1613-1620 (analytic speckle).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from dic.errors import InputError
from dic.stereo.camera import Camera

__all__ = ["Plate", "Cylinder", "SurfaceSpeckle", "surface_speckle", "render_surface",
           "render_chessboard", "chessboard_corners", "target_poses"]


def _rot(R):
    R = np.asarray(R, dtype=np.float64)
    if R.shape != (3, 3) or not np.allclose(R @ R.T, np.eye(3), atol=1e-9):
        raise InputError("rotation must be a 3x3 rotation matrix")
    return R


@dataclass(frozen=True)
class Plate:
    """A flat plate, in the reference or a deformed state.

    Attributes
    ----------
    origin : ndarray, shape (3,)
        World position (mm) of material point ``s = (0, 0)``.
    rotation : ndarray, shape (3, 3)
        Columns: the plate's in-plane axes ``e1``, ``e2`` and its normal, world frame.
    F : ndarray, shape (2, 2)
        In-plane deformation gradient with respect to the reference plate (identity: reference).
    """

    origin: np.ndarray
    rotation: np.ndarray = field(default_factory=lambda: np.eye(3))
    F: np.ndarray = field(default_factory=lambda: np.eye(2))

    def __post_init__(self):
        object.__setattr__(self, "origin", np.asarray(self.origin, dtype=np.float64).reshape(3))
        object.__setattr__(self, "rotation", _rot(self.rotation))
        F = np.asarray(self.F, dtype=np.float64)
        if F.shape != (2, 2) or not np.linalg.det(F) > 0:
            raise InputError("F must be a 2x2 deformation gradient with det F > 0")
        object.__setattr__(self, "F", F)

    def position(self, s1, s2):
        """World positions (mm) of material points, shape ``(..., 3)``."""
        a = np.stack([np.asarray(s1, float), np.asarray(s2, float)], -1) @ self.F.T
        return self.origin + a @ self.rotation[:, :2].T

    def intersect(self, origin, direction):
        """Material coordinates hit by rays; NaN where a ray misses or hits from behind.

        Returns
        -------
        s1, s2, depth : ndarray
            Material coordinates (mm) and distance along the ray.
        """
        n = self.rotation[:, 2]
        dn = direction @ n
        with np.errstate(divide="ignore", invalid="ignore"):
            t = ((self.origin - origin) @ n) / dn
        t = np.where(t > 0, t, np.nan)
        p = origin + t[..., None] * direction - self.origin
        a = p @ self.rotation[:, :2]
        s = a @ np.linalg.inv(self.F).T
        return s[..., 0], s[..., 1], t


@dataclass(frozen=True)
class Cylinder:
    """A circular cylinder seen from outside, in the reference or a stretched state.

    Attributes
    ----------
    origin : ndarray, shape (3,)
        A point on the axis (mm): material point ``s1 = 0`` lies in the cross-section through it.
    rotation : ndarray, shape (3, 3)
        Columns: the axis direction, the radial direction of ``s2 = 0`` and their cross
        product (the direction of growing ``s2`` at ``s2 = 0``).
    radius : float
        Reference radius, mm.
    axial_stretch, hoop_stretch : float
        Stretch ratios of the deformed state (1: reference).
    """

    origin: np.ndarray
    rotation: np.ndarray
    radius: float
    axial_stretch: float = 1.0
    hoop_stretch: float = 1.0

    def __post_init__(self):
        object.__setattr__(self, "origin", np.asarray(self.origin, dtype=np.float64).reshape(3))
        object.__setattr__(self, "rotation", _rot(self.rotation))
        if not (self.radius > 0 and self.axial_stretch > 0 and self.hoop_stretch > 0):
            raise InputError("radius and stretches of a cylinder must be > 0")

    def position(self, s1, s2):
        """World positions (mm) of material points, shape ``(..., 3)``."""
        s1 = np.asarray(s1, float)
        s2 = np.asarray(s2, float)
        th = s2 / self.radius
        r = self.hoop_stretch * self.radius
        local = np.stack([self.axial_stretch * s1, r * np.cos(th), r * np.sin(th)], -1)
        return self.origin + local @ self.rotation.T

    def intersect(self, origin, direction):
        """Material coordinates of the first hit of each ray; NaN where it misses."""
        o = self.rotation.T @ (origin - self.origin)
        d = direction @ self.rotation
        r = self.hoop_stretch * self.radius
        a = d[..., 1] ** 2 + d[..., 2] ** 2
        b = 2 * (o[1] * d[..., 1] + o[2] * d[..., 2])
        c = o[1] ** 2 + o[2] ** 2 - r * r
        disc = b * b - 4 * a * c
        with np.errstate(invalid="ignore", divide="ignore"):
            t = (-b - np.sqrt(disc)) / (2 * a)
        t = np.where((disc >= 0) & (t > 0), t, np.nan)
        p = o + t[..., None] * d
        s1 = p[..., 0] / self.axial_stretch
        s2 = self.radius * np.arctan2(p[..., 2], p[..., 1])
        return s1, s2, t


@dataclass(frozen=True)
class SurfaceSpeckle:
    """A :class:`dic.images.synth.Speckle` laid on a surface: pattern unit = ``pitch`` mm.

    Material point ``(s1, s2)`` (mm) shows the pattern at ``(s1 / pitch + shift, s2 / pitch +
    shift)``.
    """

    pattern: object
    pitch: float
    shift: float

    def intensity(self, s1, s2):
        """Grey level at material points (``background`` where a coordinate is NaN)."""
        from dic.images.synth import evaluate

        s1 = np.asarray(s1, float)
        s2 = np.asarray(s2, float)
        ok = np.isfinite(s1) & np.isfinite(s2)
        out = np.full(s1.shape, float(self.pattern.background))
        out[ok] = evaluate(self.pattern, s1[ok] / self.pitch + self.shift,
                           s2[ok] / self.pitch + self.shift)
        return out


def surface_speckle(extent_mm, *, blob_mm=0.6, pitch=0.1, seed=0, **options):
    """Random speckle covering ``[-extent, extent]^2`` mm of material coordinates.

    Parameters
    ----------
    extent_mm : float
        Half-width of the patterned square of material coordinates, mm.
    blob_mm : float, optional
        Mean blob radius on the surface, mm.
    pitch : float, optional
        Size of one pattern unit on the surface, mm.
    seed : int, optional
    **options
        Passed to :func:`dic.images.synth.make_speckle` (density, contrast, background, ...).

    Returns
    -------
    SurfaceSpeckle
    """
    from dic.images.synth import make_speckle

    n = int(np.ceil(2 * extent_mm / pitch)) + 1
    pat = make_speckle((n, n), radius=blob_mm / pitch, seed=seed, margin=0.0, **options)
    return SurfaceSpeckle(pat, float(pitch), float((n - 1) / 2))


def _pixel_grid(camera, sub=1):
    w, h = camera.size
    if sub == 1:
        yy, xx = np.mgrid[0:h, 0:w].astype(np.float64)
        return xx, yy
    off = (np.arange(sub) + 0.5) / sub - 0.5
    return off


def render_surface(camera: Camera, surface, speckle: SurfaceSpeckle, *, outside=0.0):
    """Exact image of a speckled surface (point samples at pixel centres).

    Parameters
    ----------
    camera : Camera
    surface : Plate or Cylinder
        The surface in the state to be imaged (deformed or reference).
    speckle : SurfaceSpeckle
        The pattern in material coordinates.
    outside : float, optional
        Grey level where a ray misses the surface.

    Returns
    -------
    ndarray, shape (height, width), float64
    """
    xx, yy = _pixel_grid(camera)
    o, d = camera.rays(xx, yy)
    s1, s2, _ = surface.intersect(o, d)
    img = speckle.intensity(s1, s2)
    img[~(np.isfinite(s1) & np.isfinite(s2))] = outside
    return img


def chessboard_corners(inner_corners, square_mm):
    """Target-frame positions of a chessboard's inner corners, in OpenCV's order.

    Corner ``(i, j)`` (column ``i`` fastest) sits at ``(i * square, j * square, 0)``.

    Returns
    -------
    ndarray, shape (cols * rows, 3), float32-exact float64
    """
    cols, rows = inner_corners
    j, i = np.mgrid[0:rows, 0:cols]
    return np.stack([i.ravel() * square_mm, j.ravel() * square_mm,
                     np.zeros(i.size)], -1).astype(np.float64)


def _board_value(s1, s2, inner_corners, square, border, levels):
    """Grey level of the board at target coordinates (mm); NaN-safe."""
    cols, rows = inner_corners
    dark, light, off = levels
    # squares from -1 to cols (and -1 to rows); corner (0, 0) is the first inner corner
    qi = np.floor(s1 / square)
    qj = np.floor(s2 / square)
    inside = (qi >= -1) & (qi <= cols - 1) & (qj >= -1) & (qj <= rows - 1)
    on_plate = ((s1 >= -square - border) & (s1 <= cols * square + border)
                & (s2 >= -square - border) & (s2 <= rows * square + border))
    black = inside & ((qi + qj) % 2 == 0)
    out = np.where(black, dark, light)
    out = np.where(on_plate, out, off)
    return np.where(np.isfinite(s1) & np.isfinite(s2), out, off)


def render_chessboard(camera: Camera, pose, inner_corners, square_mm, *, supersample=8,
                      levels=(30.0, 220.0, 110.0), border_mm=None):
    """Anti-aliased image of a chessboard target.

    Parameters
    ----------
    camera : Camera
    pose : (rotation, translation)
        Target frame to world: a target point ``q`` sits at ``rotation @ q + translation``.
    inner_corners : (int, int)
        ``(cols, rows)`` of inner corners, as in OpenCV.
    square_mm : float
        Side of one square, mm.
    supersample : int, optional
        Pixels crossed by an edge are averaged over ``supersample**2`` sub-samples.
    levels : (float, float, float), optional
        Grey of dark squares, light squares (and the plate's border), and the background.
    border_mm : float, optional
        Light border around the squares; default one square.

    Returns
    -------
    ndarray, shape (height, width), float64
    """
    R = _rot(pose[0])
    T = np.asarray(pose[1], dtype=np.float64).reshape(3)
    plate = Plate(T, R)
    border = square_mm if border_mm is None else float(border_mm)

    def value(px, py):
        o, d = camera.rays(px, py)
        s1, s2, _ = plate.intersect(o, d)
        return _board_value(s1, s2, inner_corners, square_mm, border, levels)

    xx, yy = _pixel_grid(camera)
    img = value(xx, yy)
    # pixels whose neighbourhood (two pixels) changes level hold an edge: sub-sample them
    from scipy import ndimage

    change = ndimage.maximum_filter(img, 3) != ndimage.minimum_filter(img, 3)
    iy, ix = np.nonzero(change)
    off = _pixel_grid(camera, supersample)
    ox, oy = np.meshgrid(off, off)
    chunk = max(1, 2_000_000 // supersample**2)
    for a in range(0, iy.size, chunk):
        sx = ix[a:a + chunk, None] + ox.ravel()[None, :]
        sy = iy[a:a + chunk, None] + oy.ravel()[None, :]
        img[iy[a:a + chunk], ix[a:a + chunk]] = value(sx, sy).mean(axis=1)
    return img


def target_poses(n, inner_corners, square_mm, *, distance=300.0, lateral=25.0, tilt=0.45,
                 seed=0):
    """Poses of a calibration target spread over the four quadrants of the view.

    The target's centre sits at ``(x, y, z)`` in the world (mm) with ``z`` within 10 % of
    ``distance``, and ``x``, ``y`` in the quadrants in turn, up to ``lateral`` (``0.75 lateral``
    for ``y``) from the axis, so the fit reaches the image corners where distortion is largest;
    the target is tilted by a random rotation vector with components up to ``tilt`` rad (half
    that about its normal).

    Returns
    -------
    list of (rotation, translation)
        For :func:`render_chessboard`.
    """
    from dic.stereo.camera import rotation_matrix

    cols, rows = inner_corners
    rng = np.random.default_rng(seed)
    ctr = np.array([(cols - 1) * square_mm / 2, (rows - 1) * square_mm / 2, 0.0])
    out = []
    for k in range(n):
        rv = rng.uniform(-tilt, tilt, 3)
        rv[2] *= 0.5
        Rb = rotation_matrix(rv)
        sx, sy = [(1, 1), (-1, 1), (1, -1), (-1, -1)][k % 4]
        P = np.array([sx * rng.uniform(0.4, 1.0) * lateral,
                      sy * rng.uniform(0.3, 0.75) * lateral,
                      distance * rng.uniform(0.9, 1.1)])
        out.append((Rb, P - Rb @ ctr))
    return out
