"""Particle selection by position."""

import numpy as np

__all__ = ["select_sphere"]


def select_sphere(chunk, centre_kpc, radius_kpc):
    """Return the particles of ``chunk`` whose positions lie within a sphere.

    Parameters
    ----------
    chunk : ParticleChunk
        Particles in internal units.
    centre_kpc : numpy.ndarray, shape (3,)
        Centre of the sphere, in kpc.
    radius_kpc : float
        Radius of the sphere, in kpc; particles at exactly this distance are kept.

    Returns
    -------
    ParticleChunk
        The selected particles, in their original order (possibly none).

    Raises
    ------
    ValueError
        If ``centre_kpc`` is not three finite numbers or ``radius_kpc`` is not
        a positive finite number.

    Examples
    --------
    >>> import numpy as np
    >>> from pipeline.particles import ParticleChunk
    >>> ones = np.ones(3)
    >>> chunk = ParticleChunk(position_kpc=np.array([[0.0, 0, 0], [3, 4, 0], [6, 0, 0]]),
    ...                       velocity_kms=np.zeros((3, 3)), mass_msun=ones, h_kpc=ones,
    ...                       temperature_k=ones, neutral_fraction=ones, hydrogen_fraction=ones)
    >>> select_sphere(chunk, np.zeros(3), 5.0).n_particles
    2
    """
    centre_kpc = np.asarray(centre_kpc, dtype=np.float64)
    if centre_kpc.shape != (3,) or not np.all(np.isfinite(centre_kpc)):
        raise ValueError(f"'centre_kpc' must be three finite numbers (x, y, z in kpc); got {centre_kpc!r}")
    if not np.isfinite(radius_kpc) or radius_kpc <= 0:
        raise ValueError(f"'radius_kpc' must be a positive finite number of kpc, e.g. 30.0; "
                         f"got {radius_kpc!r}")
    offset = chunk.position_kpc - centre_kpc
    inside = np.einsum("ij,ij->i", offset, offset) <= radius_kpc * radius_kpc
    return chunk.take(inside)
