"""Snapshot reading: HDF5 field maps, unit and cosmology factors, chunks, selection."""

from ._chunks import ParticleChunk

__all__ = ["ParticleChunk"]
