"""The galaxy centre, its velocity frame and its spin axis, from chunked particles.

Every function here takes ``positions``, a zero-argument callable that returns
a fresh iterable of ``(position_kpc, mass_msun, velocity_kms)`` tuples of plain
arrays (shapes (n, 3), (n,), (n, 3)); each call is one pass over the gas, so
memory stays bounded by the chunk size.
"""

import math

import astropy.units as u
import numpy as np

from ..errors import EmptyFieldError, SnapshotError
from ..units import LENGTH, VELOCITY, strip_units

__all__ = ["find_centre", "find_frame_velocity", "angular_momentum_axis"]

_METHODS = ("explicit", "centre_of_mass", "shrinking_sphere")
#: Shrinking-sphere radius factor per step: 2.5 % smaller (Power et al. 2003, MNRAS 338, 14).
_SHRINK_FACTOR = 0.975
#: Stop once fewer than max(_STOP_PARTICLES, _STOP_FRACTION * N) particles remain in the sphere.
_STOP_PARTICLES = 1000
_STOP_FRACTION = 0.01
#: Also stop once the radius falls below this fraction of the starting radius (guarantees an
#: end when many particles share one position); 1e-6 is reached after about 550 steps.
_MIN_RADIUS_FRACTION = 1.0e-6
#: Particles kept in memory so that later steps need no new pass: at most 2 million, i.e. 64 MB
#: of positions and masses.  A cached ball of radius 2 r around the centre c serves every later
#: step whose sphere lies inside it, and gives exactly the result a full pass would.
_CACHE_PARTICLES = 2_000_000
#: An angular momentum below this fraction of sum(m |r| |v|) counts as no net rotation.
_NO_ROTATION_FRACTION = 1.0e-12


def _chunks(positions):
    """Yield validated (position_kpc, mass_msun, velocity_kms) float64 arrays from one pass."""
    for position_kpc, mass_msun, velocity_kms in positions():
        position_kpc = np.asarray(position_kpc, dtype=np.float64)
        mass_msun = np.asarray(mass_msun, dtype=np.float64)
        velocity_kms = np.asarray(velocity_kms, dtype=np.float64)
        n_particles = mass_msun.shape[0] if mass_msun.ndim == 1 else -1
        if (mass_msun.ndim != 1 or position_kpc.shape != (n_particles, 3)
                or velocity_kms.shape != (n_particles, 3)):
            raise ValueError("each chunk from 'positions' must be (position_kpc (n, 3), mass_msun (n,), "
                             f"velocity_kms (n, 3)); got shapes {position_kpc.shape}, "
                             f"{mass_msun.shape}, {velocity_kms.shape}")
        yield position_kpc, mass_msun, velocity_kms


def _as_vector(name, value, unit):
    """Return a 3-vector Quantity as a plain float64 array in ``unit``."""
    array = strip_units(value, unit, name=name)
    if array.shape != (3,) or not np.all(np.isfinite(array)):
        raise ValueError(f"'{name}' must be a finite 3-vector, e.g. [0, 0, 0] * u.{unit}; got {value!r}")
    return array


def _as_radius(name, value):
    """Return a positive length Quantity as a float in kpc."""
    radius_kpc = strip_units(value, LENGTH, name=name)
    if radius_kpc.shape != () or not radius_kpc > 0:
        raise ValueError(f"'{name}' must be a positive length, e.g. '5 kpc'; got {value!r}")
    return float(radius_kpc)


def _format_kpc(vector_kpc):
    """Short text form of a position for messages."""
    return "(" + ", ".join(f"{value:.4g}" for value in vector_kpc) + ") kpc"


def _mass_centre(positions):
    """One pass: mass centre, particle count and bounding box of all particles."""
    weighted = np.zeros(3)
    total_mass = 0.0
    n_total = 0
    low, high = np.full(3, np.inf), np.full(3, -np.inf)
    for position_kpc, mass_msun, _ in _chunks(positions):
        if mass_msun.size == 0:
            continue
        weighted += mass_msun @ position_kpc
        total_mass += float(mass_msun.sum())
        n_total += mass_msun.size
        low = np.minimum(low, position_kpc.min(axis=0))
        high = np.maximum(high, position_kpc.max(axis=0))
    if n_total == 0 or not total_mass > 0:
        raise EmptyFieldError(f"the gas must hold particles of positive mass to find a centre; "
                              f"got {n_total} particles of total mass {total_mass:g} Msun")
    return weighted / total_mass, n_total


def _enclosing_radius(positions, centre_kpc):
    """One pass: distance from ``centre_kpc`` to the farthest particle (rounded up, so it is inside)."""
    radius2 = 0.0
    for position_kpc, _, _ in _chunks(positions):
        if position_kpc.shape[0]:
            radius2 = max(radius2, float(np.max(np.sum((position_kpc - centre_kpc) ** 2, axis=1))))
    return math.sqrt(radius2) * (1 + 1e-12)


class _SphereCache:
    """Particles within ``radius_kpc`` of ``centre_kpc``, kept in memory (or nothing)."""

    def __init__(self):
        self.centre_kpc = None
        self.radius_kpc = -1.0
        self.position_kpc = None
        self.mass_msun = None

    def covers(self, centre_kpc, radius_kpc):
        """True if every particle within ``radius_kpc`` of ``centre_kpc`` is in the cache."""
        return (self.centre_kpc is not None
                and np.linalg.norm(centre_kpc - self.centre_kpc) + radius_kpc <= self.radius_kpc)


def _sphere_mass_centre(positions, centre_kpc, radius_kpc, cache):
    """Mass centre and count of particles within ``radius_kpc``; refills ``cache`` on a pass."""
    if cache.covers(centre_kpc, radius_kpc):
        inside = np.sum((cache.position_kpc - centre_kpc) ** 2, axis=1) <= radius_kpc ** 2
        mass = cache.mass_msun[inside]
        total_mass = float(mass.sum())
        centre = mass @ cache.position_kpc[inside] / total_mass if total_mass > 0 else centre_kpc
        return centre, int(np.count_nonzero(inside))
    cache_radius_kpc = 2.0 * radius_kpc
    kept_positions, kept_masses, n_kept = [], [], 0
    weighted, total_mass, n_inside = np.zeros(3), 0.0, 0
    for position_kpc, mass_msun, _ in _chunks(positions):
        distance2 = np.sum((position_kpc - centre_kpc) ** 2, axis=1)
        inside = distance2 <= radius_kpc ** 2
        weighted += mass_msun[inside] @ position_kpc[inside]
        total_mass += float(mass_msun[inside].sum())
        n_inside += int(np.count_nonzero(inside))
        if kept_positions is not None:
            near = distance2 <= cache_radius_kpc ** 2
            n_kept += int(np.count_nonzero(near))
            if n_kept > _CACHE_PARTICLES:
                kept_positions = kept_masses = None
            else:
                kept_positions.append(position_kpc[near])
                kept_masses.append(mass_msun[near])
    if kept_positions is not None:
        cache.centre_kpc, cache.radius_kpc = centre_kpc.copy(), cache_radius_kpc
        cache.position_kpc = np.concatenate(kept_positions) if kept_positions else np.zeros((0, 3))
        cache.mass_msun = np.concatenate(kept_masses) if kept_masses else np.zeros(0)
    centre = weighted / total_mass if total_mass > 0 else centre_kpc
    return centre, n_inside


def _shrinking_sphere(positions):
    """Shrinking-sphere centre (Power et al. 2003); returns the centre and the last radius used."""
    centre_kpc, n_total = _mass_centre(positions)
    radius_kpc = _enclosing_radius(positions, centre_kpc)
    min_radius_kpc = _MIN_RADIUS_FRACTION * radius_kpc
    n_stop = max(_STOP_PARTICLES, math.ceil(_STOP_FRACTION * n_total))
    cache = _SphereCache()
    last_radius_kpc = radius_kpc
    while radius_kpc > min_radius_kpc:
        new_centre_kpc, n_inside = _sphere_mass_centre(positions, centre_kpc, radius_kpc, cache)
        if n_inside < n_stop:
            break
        centre_kpc, last_radius_kpc = new_centre_kpc, radius_kpc
        radius_kpc *= _SHRINK_FACTOR
    return centre_kpc, last_radius_kpc


def _require_gas_within(positions, centre_kpc, radius_kpc, what):
    """One pass: raise EmptyFieldError if no particle lies within ``radius_kpc`` of the centre."""
    for position_kpc, _, _ in _chunks(positions):
        if np.any(np.sum((position_kpc - centre_kpc) ** 2, axis=1) <= radius_kpc ** 2):
            return
    raise EmptyFieldError(f"the selection radius around the {what} centre {_format_kpc(centre_kpc)} "
                          f"must hold gas; got no particle within {radius_kpc:g} kpc "
                          "(check geometry.centre_position or geometry.selection_radius)")


def find_centre(positions, *, method, centre_position=None, selection_radius=None) -> u.Quantity:
    """Find the centre of the galaxy.

    Parameters
    ----------
    positions : callable
        Zero-argument callable returning a fresh iterable of
        ``(position_kpc, mass_msun, velocity_kms)`` tuples (one pass each).
    method : {"explicit", "centre_of_mass", "shrinking_sphere"}
        ``"explicit"`` returns ``centre_position``; ``"centre_of_mass"`` the
        mass centre of all particles; ``"shrinking_sphere"`` the iterated mass
        centre of a shrinking sphere (see Notes).
    centre_position : `~astropy.units.Quantity` ['length'], shape (3,), optional
        The centre, required with ``method="explicit"`` and refused otherwise.
    selection_radius : `~astropy.units.Quantity` ['length'], optional
        If given, the centre found must have gas within this radius
        (costs at most one more pass).

    Returns
    -------
    `~astropy.units.Quantity` ['length'], shape (3,)
        The centre in simulation coordinates (kpc).

    Raises
    ------
    ValueError
        If ``method`` is unknown, ``centre_position`` is missing or
        superfluous, or a chunk has the wrong shapes.
    pipeline.errors.EmptyFieldError
        If there is no gas of positive mass, or none within ``selection_radius``.

    Notes
    -----
    Shrinking sphere (Power et al. 2003, MNRAS 338, 14, Sect. 2.2.2): start
    at the mass centre of all particles with a sphere enclosing them all;
    repeatedly recentre on the mass centre of the particles inside and
    shrink the radius by 2.5 %.  Stop, keeping the last centre computed, when
    fewer than max(1000, 1 % of all) particles remain inside, or when the
    radius falls below 1e-6 of the starting radius (so with fewer than 1000
    particles in all the result is the mass centre).  Each step reads the
    particles once, until the particles within twice the radius number at
    most 2 million; those are then kept in memory and the remaining steps
    use them (with identical results).
    """
    if method not in _METHODS:
        raise ValueError(f"'method' must be one of {_METHODS}; got {method!r}")
    if (method == "explicit") != (centre_position is not None):
        raise ValueError("'centre_position' must be given exactly when method is 'explicit'; "
                         f"got method {method!r} with centre_position={centre_position!r}")
    radius_kpc = None if selection_radius is None else _as_radius("selection_radius", selection_radius)
    if method == "explicit":
        centre_kpc = _as_vector("centre_position", centre_position, LENGTH)
        needs_check = radius_kpc is not None
    elif method == "centre_of_mass":
        centre_kpc = _mass_centre(positions)[0]
        needs_check = radius_kpc is not None
    else:
        centre_kpc, last_radius_kpc = _shrinking_sphere(positions)
        # The last centre is the mass centre of particles within last_radius of the previous centre,
        # so all of them lie within 2 * last_radius of it: a larger selection radius holds gas.
        needs_check = radius_kpc is not None and radius_kpc < 2 * last_radius_kpc
    if needs_check:
        _require_gas_within(positions, centre_kpc, radius_kpc, method.replace("_", " "))
    return centre_kpc * LENGTH


def find_frame_velocity(positions, centre, *, radius) -> u.Quantity:
    """Mass-weighted mean velocity of the gas within ``radius`` of ``centre``.

    Parameters
    ----------
    positions : callable
        As for `find_centre`.
    centre : `~astropy.units.Quantity` ['length'], shape (3,)
    radius : `~astropy.units.Quantity` ['length']

    Returns
    -------
    `~astropy.units.Quantity` ['speed'], shape (3,)
        Frame velocity in simulation coordinates (km/s).

    Raises
    ------
    pipeline.errors.EmptyFieldError
        If no gas of positive mass lies within ``radius``.
    """
    centre_kpc = _as_vector("centre", centre, LENGTH)
    radius_kpc = _as_radius("radius", radius)
    momentum = np.zeros(3)
    total_mass = 0.0
    for position_kpc, mass_msun, velocity_kms in _chunks(positions):
        inside = np.sum((position_kpc - centre_kpc) ** 2, axis=1) <= radius_kpc ** 2
        momentum += mass_msun[inside] @ velocity_kms[inside]
        total_mass += float(mass_msun[inside].sum())
    if not total_mass > 0:
        raise EmptyFieldError(f"the frame radius must hold gas of positive mass; got none within "
                              f"{radius_kpc:g} kpc of the centre {_format_kpc(centre_kpc)} "
                              "(increase geometry.frame_radius)")
    return momentum / total_mass * VELOCITY


def angular_momentum_axis(positions, centre, frame_velocity, *, radius) -> np.ndarray:
    """Unit vector along the total angular momentum of the gas within ``radius``.

    Parameters
    ----------
    positions : callable
        As for `find_centre`.
    centre : `~astropy.units.Quantity` ['length'], shape (3,)
    frame_velocity : `~astropy.units.Quantity` ['speed'], shape (3,)
    radius : `~astropy.units.Quantity` ['length']

    Returns
    -------
    numpy.ndarray, shape (3,)
        Direction of L = sum m (r - centre) x (v - frame_velocity) in
        simulation coordinates.

    Raises
    ------
    pipeline.errors.EmptyFieldError
        If no particle lies within ``radius``.
    pipeline.errors.SnapshotError
        If the selected gas has no net rotation (|L| below 1e-12 of sum m |r| |v|).
    """
    centre_kpc = _as_vector("centre", centre, LENGTH)
    frame_kms = _as_vector("frame_velocity", frame_velocity, VELOCITY)
    radius_kpc = _as_radius("radius", radius)
    angular_momentum = np.zeros(3)
    scale = 0.0
    n_inside = 0
    for position_kpc, mass_msun, velocity_kms in _chunks(positions):
        offset_kpc = position_kpc - centre_kpc
        inside = np.sum(offset_kpc ** 2, axis=1) <= radius_kpc ** 2
        offset_kpc = offset_kpc[inside]
        relative_kms = velocity_kms[inside] - frame_kms
        mass = mass_msun[inside]
        angular_momentum += mass @ np.cross(offset_kpc, relative_kms)
        scale += float(mass @ (np.linalg.norm(offset_kpc, axis=1) * np.linalg.norm(relative_kms, axis=1)))
        n_inside += int(np.count_nonzero(inside))
    if n_inside == 0:
        raise EmptyFieldError(f"the radius for the spin axis must hold gas; got no particle within "
                              f"{radius_kpc:g} kpc of the centre {_format_kpc(centre_kpc)}")
    norm = float(np.linalg.norm(angular_momentum))
    if not norm > _NO_ROTATION_FRACTION * scale:
        raise SnapshotError(f"the gas within {radius_kpc:g} kpc of the centre must rotate to define a "
                            f"spin axis; got |L| = {norm:.3g} Msun kpc km/s from {n_inside} particles "
                            "(use geometry.orientation = 'simulation_axes' or 'explicit')")
    return angular_momentum / norm
