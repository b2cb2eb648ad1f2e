"""Strain: displacement gradients by pointwise least squares, and finite-strain measures.

Shear components (``xy``) are TENSOR shear, half the engineering shear angle.

Public API
----------
strain_field
    :class:`StrainField` from a :class:`~dic.field.DisplacementField`.
displacement_gradient
    The least-squares gradients alone.
strain_tensor, green_lagrange, infinitesimal, euler_almansi, hencky, engineering
    Strain measures from deformation gradients ``F`` of shape (..., 2, 2).
polar_decomposition, rotation_angle, area_change, principal_strains, max_shear,
equivalent_strain, out_of_plane, incompressible_zz, nonlinear_part, nonlinear_share,
nonlinear_mask,
measure_difference
    Derived quantities.
"""

from dic.strain._api import strain_field, vsg_size
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW
from dic.strain._gradients import FITS, GradientFit, default_min_points, displacement_gradient
from dic.strain._measures import (MEASURES, area_change, canonical_measure, engineering,
                        equivalent_strain, euler_almansi, green_lagrange, hencky,
                        incompressible_zz, infinitesimal,
                        max_shear, measure_difference, nonlinear_mask, nonlinear_part,
                        nonlinear_share, out_of_plane, polar_decomposition, principal_strains,
                        rotation_angle, strain_tensor)
from dic.strain._result import COMPONENTS, LineProfile, StrainField
from dic.strain._sample import bilinear

__all__ = [
    "strain_field", "StrainField", "DEFAULT_WINDOW", "DEFAULT_MEASURE", "LineProfile",
    "COMPONENTS", "vsg_size",
    "displacement_gradient", "GradientFit", "default_min_points", "FITS",
    "MEASURES", "canonical_measure", "strain_tensor", "green_lagrange", "infinitesimal",
    "euler_almansi", "hencky", "engineering", "polar_decomposition", "rotation_angle",
    "area_change", "principal_strains", "max_shear", "equivalent_strain", "out_of_plane",
    "incompressible_zz",
    "nonlinear_part", "nonlinear_share", "nonlinear_mask", "measure_difference",
    "bilinear",
]
