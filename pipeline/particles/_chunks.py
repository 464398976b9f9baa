"""ParticleChunk: a block of gas particles as plain arrays in internal units."""

import dataclasses

import numpy as np

__all__ = ["ParticleChunk"]

_PER_PARTICLE = ("position_kpc", "velocity_kms", "mass_msun", "h_kpc", "temperature_k",
                 "neutral_fraction", "hydrogen_fraction", "molecular_fraction",
                 "metallicity", "density_msun_kpc3")


@dataclasses.dataclass(frozen=True, eq=False)
class ParticleChunk:
    """Gas particles, one array per quantity, in kpc, km/s, Msun and K.

    Parameters
    ----------
    position_kpc : numpy.ndarray, shape (n_particles, 3)
    velocity_kms : numpy.ndarray, shape (n_particles, 3)
    mass_msun : numpy.ndarray, shape (n_particles,)
    h_kpc : numpy.ndarray, shape (n_particles,)
        SPH smoothing length as stored by the simulation code (see
        ``grid.support_factor`` for the support radius).
    temperature_k : numpy.ndarray, shape (n_particles,)
    neutral_fraction : numpy.ndarray, shape (n_particles,)
        Neutral fraction of the hydrogen (atomic plus molecular).
    hydrogen_fraction : numpy.ndarray, shape (n_particles,)
        Hydrogen mass fraction X of the gas.
    molecular_fraction, metallicity, density_msun_kpc3 : numpy.ndarray or None
        Optional quantities; ``molecular_fraction`` is the fraction of the
        neutral hydrogen that is molecular.
    """

    position_kpc: np.ndarray
    velocity_kms: np.ndarray
    mass_msun: np.ndarray
    h_kpc: np.ndarray
    temperature_k: np.ndarray
    neutral_fraction: np.ndarray
    hydrogen_fraction: np.ndarray
    molecular_fraction: np.ndarray | None = None
    metallicity: np.ndarray | None = None
    density_msun_kpc3: np.ndarray | None = None

    @property
    def n_particles(self) -> int:
        """Number of particles in the chunk."""
        return int(self.mass_msun.shape[0])

    def take(self, selection) -> "ParticleChunk":
        """Return the particles picked by a boolean mask or an index array."""
        return dataclasses.replace(self, **{
            name: None if getattr(self, name) is None else getattr(self, name)[selection]
            for name in _PER_PARTICLE
        })

    def with_frame(self, *, position_kpc, velocity_kms) -> "ParticleChunk":
        """Return the same particles with new positions and velocities (e.g. rotated)."""
        return dataclasses.replace(self, position_kpc=position_kpc, velocity_kms=velocity_kms)

    @staticmethod
    def concatenate(chunks) -> "ParticleChunk":
        """Join chunks into one; optional quantities survive only if every chunk has them."""
        chunks = list(chunks)
        if not chunks:
            raise ValueError("'chunks' must hold at least one ParticleChunk; got none")
        joined = {}
        for name in _PER_PARTICLE:
            parts = [getattr(chunk, name) for chunk in chunks]
            joined[name] = None if any(p is None for p in parts) else np.concatenate(parts)
        return ParticleChunk(**joined)
