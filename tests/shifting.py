"""Exact sub-pixel translation of a real texture, for tests with exactly known motion."""

import numpy as np
from scipy import ndimage


def fourier_shift(img, dx, dy):
    """``img`` translated by ``(dx, dy)`` px (x along columns), exactly for a periodic
    band-limited image: a phase ramp in the Fourier domain (scipy.ndimage.fourier_shift)."""
    return np.real(np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(img), (dy, dx))))
