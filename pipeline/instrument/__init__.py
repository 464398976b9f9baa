"""The instrument: Gaussian beams, Jy/pixel to Jy/beam to K, radiometer noise."""

from ._beam import (JY_PER_PIXEL, BeamSpec, beam_kernel, convolve_with_beam, cube_to_kelvin, fft_plane_pixels,
                    jy_per_beam_to_kelvin)
from ._noise import add_thermal_noise, interferometer_rms, single_dish_rms

__all__ = [
    "JY_PER_PIXEL",
    "BeamSpec",
    "beam_kernel",
    "convolve_with_beam",
    "fft_plane_pixels",
    "jy_per_beam_to_kelvin",
    "cube_to_kelvin",
    "single_dish_rms",
    "interferometer_rms",
    "add_thermal_noise",
]
