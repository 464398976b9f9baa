"""A snapshot held in memory: read once, then served chunk by chunk like the file."""

import dataclasses
import pathlib

from ._chunks import ParticleChunk

__all__ = ["MemorySnapshot", "load_into_memory"]


@dataclasses.dataclass(frozen=True, eq=False)
class MemorySnapshot:
    """Particles held in memory, with the interface of `Snapshot` the run path uses.

    Several views of one snapshot can then share one read of the file.  Build it
    with :func:`load_into_memory`.

    Parameters
    ----------
    path : pathlib.Path
        The file the particles were read from (for messages).
    particles : ParticleChunk
        Every particle, in file order, in internal units.
    chunk_particles : int
        Particles per chunk yielded by `iter_chunks`, as for the file, so a run
        from memory deposits the same chunks in the same order.
    """

    path: pathlib.Path
    particles: ParticleChunk
    chunk_particles: int

    @property
    def n_particles(self) -> int:
        """Number of gas particles."""
        return self.particles.n_particles

    def iter_chunks(self):
        """Yield the particles as `ParticleChunk` blocks of at most ``chunk_particles`` rows."""
        for start in range(0, self.n_particles, self.chunk_particles):
            yield self.particles.take(slice(start, start + self.chunk_particles))


def load_into_memory(snapshot) -> MemorySnapshot:
    """Read every particle of an opened `Snapshot` into a `MemorySnapshot`.

    Parameters
    ----------
    snapshot : Snapshot
        From :func:`open_snapshot`.

    Returns
    -------
    MemorySnapshot

    Raises
    ------
    SnapshotError
        As for `Snapshot.iter_chunks`.
    """
    return MemorySnapshot(path=snapshot.path, particles=ParticleChunk.concatenate(snapshot.iter_chunks()),
                          chunk_particles=snapshot.chunk_particles)
