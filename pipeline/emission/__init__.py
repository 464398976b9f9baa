"""Line emission: the 21-cm constants, HI masses, fluxes, column densities and widths."""

from ._hi21 import (EINSTEIN_A_HI, column_density_from_brightness, column_density_from_flux, hi_flux_integral,
                    hi_mass, hi_mass_from_flux, hi_weights_jy_hz, thermal_dispersion)

__all__ = [
    "EINSTEIN_A_HI",
    "hi_mass",
    "hi_flux_integral",
    "hi_mass_from_flux",
    "column_density_from_brightness",
    "column_density_from_flux",
    "thermal_dispersion",
    "hi_weights_jy_hz",
]
