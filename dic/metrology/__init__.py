"""How good a measurement is: pattern quality, noise floor, per-point uncertainty, self-check and
settings advice.

One private module per job; scipy, numba and matplotlib load only when a function runs.

Public API
----------
find_speckled_region
    The painted part of an image, apart from a plain background (used when no ROI is given).
pattern_quality
    Speckle size, mean intensity gradient, SSSIG, grey-level use, saturation, image noise and
    the predicted displacement noise per subset size, with a verdict and its reasons.
image_noise, pair_noise
    Image noise from one image, or from two images of a static scene.
noise_floor
    Spatial and temporal noise of displacement and strain from images of the unloaded specimen.
point_sigma, predicted_sigma
    Predicted standard deviation of u and v from each subset's Hessian and the image noise
    (what :func:`dic.correlate` stores as ``std_u``, ``std_v``).
self_check
    The user's settings run on the user's reference image under exactly known motion: bias,
    noise, strain noise, spatial resolution, metrological efficiency.
advise
    Subset, step and strain window that meet a strain-noise or spatial-resolution target.
displacement_transfer, strain_transfer, attenuation_period
    Savitzky-Golay transfer functions of subset and strain window (theory).
"""

from __future__ import annotations

from dic.matching import (gradient_noise_gain, image_noise, pair_noise, point_sigma,
                          predicted_sigma)

from dic.metrology._advise import SUBSETS as ADVICE_SUBSETS
from dic.metrology._advise import WINDOWS as ADVICE_WINDOWS
from dic.metrology._advise import Advice, advise
from dic.metrology._floor import NoiseFloor, noise_floor
from dic.metrology._pattern import (PatternQuality, find_speckled_region, mean_intensity_gradient,
                                   pattern_quality, speckle_size, sssig_maps)
from dic.metrology._selfcheck import SelfCheck, self_check
from dic.metrology._transfer import attenuation_period, displacement_transfer, strain_transfer

__all__ = [
    "pattern_quality", "PatternQuality", "find_speckled_region", "mean_intensity_gradient", "sssig_maps", "speckle_size",
    "image_noise", "pair_noise", "noise_floor", "NoiseFloor", "point_sigma", "predicted_sigma",
    "gradient_noise_gain", "self_check", "SelfCheck", "advise", "Advice", "ADVICE_SUBSETS",
    "ADVICE_WINDOWS",
    "displacement_transfer", "strain_transfer", "attenuation_period",
]
