"""Snapshot reading: HDF5 field maps, unit and cosmology factors, chunks, selection."""

from ._chunks import ParticleChunk
from ._fields import FieldSource
from ._hdf5 import Snapshot, describe_hdf5, iter_positions, open_snapshot
from ._memory import MemorySnapshot, load_into_memory
from ._select import select_sphere

__all__ = ["ParticleChunk", "FieldSource", "Snapshot", "open_snapshot", "iter_positions",
           "describe_hdf5", "select_sphere", "MemorySnapshot", "load_into_memory"]
