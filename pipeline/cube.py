"""The cube that travels between stages."""

import dataclasses

import astropy.units as u
import numpy as np
from astropy.wcs import WCS

__all__ = ["Cube"]


@dataclasses.dataclass(frozen=True, eq=False)
class Cube:
    """A spectral cube with its sky grid, unit, beam and provenance.

    Parameters
    ----------
    data : numpy.ndarray, shape (n_chan, n_y, n_x)
        Values in ``unit``.
    wcs : `~astropy.wcs.WCS`
        Three-dimensional WCS (celestial axes first, spectral third).
    unit : `~astropy.units.UnitBase`
        Unit of ``data`` (e.g. Jy/pixel before the beam, Jy/beam after it).
    beam : `~pipeline.instrument.BeamSpec` or None
        The restoring beam, once one has been applied.
    provenance : dict
        Free-form record of how the cube was made (stage parameters, noise rms).
    """

    data: np.ndarray
    wcs: WCS
    unit: u.UnitBase
    beam: object = None
    provenance: dict = dataclasses.field(default_factory=dict)

    def __post_init__(self):
        if np.ndim(self.data) != 3:
            raise ValueError(f"'data' must have shape (n_chan, n_y, n_x); got shape {np.shape(self.data)}")
        if self.wcs.naxis != 3:
            raise ValueError(f"'wcs' must have 3 axes; got {self.wcs.naxis}")

    @property
    def quantity(self) -> u.Quantity:
        """The data as a Quantity (a view, no copy)."""
        return u.Quantity(self.data, self.unit, copy=False)
