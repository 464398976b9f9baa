"""Viewing angles: from simulation coordinates to the observer's sky frame."""

import dataclasses

import astropy.units as u
import numpy as np

from ..particles import ParticleChunk

__all__ = ["ViewSpec", "rotation_for_view", "orient_chunk"]

_ORIENTATIONS = ("angular_momentum", "simulation_axes", "explicit")
#: Tolerance on R R^T = I and det R = 1 for a rotation matrix given by the user.
_ORTHONORMAL_ATOL = 1e-8


def _check_angle(name, value):
    """Refuse anything but a finite scalar angle Quantity."""
    if not (isinstance(value, u.Quantity) and value.unit.physical_type == "angle"
            and value.isscalar and np.isfinite(value.value)):
        raise ValueError(f"'{name}' must be an angle, e.g. '60 deg'; got {value!r}")
    return value.to(u.deg)


def _check_rotation_matrix(matrix):
    """Return ``matrix`` as a read-only float64 proper rotation or refuse it."""
    array = np.array(matrix, dtype=np.float64)
    if array.shape != (3, 3) or not np.all(np.isfinite(array)):
        raise ValueError(f"'rotation_matrix' must be a finite 3 x 3 matrix; got {matrix!r}")
    if not np.allclose(array @ array.T, np.eye(3), rtol=0, atol=_ORTHONORMAL_ATOL):
        raise ValueError("'rotation_matrix' must be orthonormal (rows of unit length, at right "
                         f"angles to each other); got {array.tolist()}")
    if np.linalg.det(array) < 0:
        raise ValueError("'rotation_matrix' must have determinant +1 (a rotation, not a "
                         f"reflection: rows east, north, away form a right-handed set); got {array.tolist()}")
    array.flags.writeable = False
    return array


@dataclasses.dataclass(frozen=True, kw_only=True, eq=False)
class ViewSpec:
    """From which direction the galaxy is seen.

    Parameters
    ----------
    inclination : `~astropy.units.Quantity` ['angle'], optional
        Angle in [0, 180] deg between the reference axis (the spin axis) and
        the direction towards the observer: 0 = face-on with the spin axis
        pointing at the observer, so the disc turns counter-clockwise on the
        sky; 90 = edge-on; 180 = face-on turning clockwise.  Required unless
        ``orientation`` is ``"explicit"`` (where it is not used).
    position_angle : `~astropy.units.Quantity` ['angle'], optional
        Position angle, east of north, of the receding half of the major axis
        (the kinematic position angle).  Required unless ``orientation`` is
        ``"explicit"`` (where it is not used).
    orientation : {"angular_momentum", "simulation_axes", "explicit"}
        Reference for the angles: the angular momentum of the central gas, the
        simulation z axis, or ``rotation_matrix`` as given.
    rotation_matrix : array_like, shape (3, 3), optional
        Only with ``orientation="explicit"``: rows are the sky-east, sky-north
        and away-from-observer unit vectors in simulation coordinates.

    Raises
    ------
    ValueError
        If an angle is missing or malformed, ``inclination`` is outside
        [0, 180] deg, ``orientation`` is unknown, or ``rotation_matrix`` is
        missing, not a rotation, or given with another orientation.
    """

    inclination: u.Quantity | None = None
    position_angle: u.Quantity | None = None
    orientation: str = "angular_momentum"
    rotation_matrix: np.ndarray | None = None

    def __post_init__(self):
        if self.orientation not in _ORIENTATIONS:
            raise ValueError(f"'orientation' must be one of {_ORIENTATIONS}; got {self.orientation!r}")
        if self.orientation == "explicit":
            if self.rotation_matrix is None:
                raise ValueError("'rotation_matrix' must be given when orientation is 'explicit'; got None")
            object.__setattr__(self, "rotation_matrix", _check_rotation_matrix(self.rotation_matrix))
            for name in ("inclination", "position_angle"):
                if getattr(self, name) is not None:
                    object.__setattr__(self, name, _check_angle(name, getattr(self, name)))
            return
        if self.rotation_matrix is not None:
            raise ValueError("'rotation_matrix' is used only when orientation is 'explicit'; "
                             f"got orientation {self.orientation!r} with a matrix")
        inclination = _check_angle("inclination", self.inclination)
        if not 0 <= inclination.value <= 180:
            raise ValueError(f"'inclination' must lie in [0, 180] deg; got {self.inclination!r}")
        object.__setattr__(self, "inclination", inclination)
        object.__setattr__(self, "position_angle", _check_angle("position_angle", self.position_angle))


def _unit_spin_axis(spin_axis):
    """Return ``spin_axis`` as a float64 unit 3-vector or refuse it."""
    axis = np.array(spin_axis, dtype=np.float64)
    norm = np.linalg.norm(axis) if axis.shape == (3,) else 0.0
    if axis.shape != (3,) or not np.isfinite(norm) or norm == 0:
        raise ValueError(f"'spin_axis' must be a finite non-zero 3-vector; got {spin_axis!r}")
    return axis / norm


def _in_disc_reference(spin):
    """Unit vector in the disc plane that is put on the receding major axis.

    The simulation x axis projected onto the disc plane, or the simulation y
    axis if the spin lies within 45 deg of x; either projection then has
    length >= 1/sqrt(2), so the choice is well conditioned and deterministic.
    """
    reference = np.array([1.0, 0.0, 0.0]) if abs(spin[0]) <= np.sqrt(0.5) else np.array([0.0, 1.0, 0.0])
    reference = reference - (reference @ spin) * spin
    return reference / np.linalg.norm(reference)


def rotation_for_view(view: ViewSpec, *, spin_axis=None) -> np.ndarray:
    """Return the rotation from simulation coordinates to the observer's sky frame.

    Parameters
    ----------
    view : ViewSpec
    spin_axis : array_like, shape (3,), optional
        Reference (angular momentum) direction in simulation coordinates;
        required for ``orientation="angular_momentum"`` and refused otherwise
        (``"simulation_axes"`` uses the simulation z axis).

    Returns
    -------
    numpy.ndarray, shape (3, 3)
        Proper rotation R whose rows are the sky-east, sky-north and
        away-from-observer unit vectors in simulation coordinates, so that
        ``r_observer = R @ (r - centre)``.

    Raises
    ------
    ValueError
        If ``spin_axis`` is missing, zero, or given for an orientation that does not use it.

    Notes
    -----
    In the observer frame (x east, y north, z away; right-handed) the
    receding half of the major axis is m = (sin PA, cos PA, 0) and the spin
    axis is n = (sin i cos PA, -sin i sin PA, -cos i).  Then n x m has a
    positive z component, so gas at m moves away from the observer, and at
    i = 0 the spin points at the observer.  The in-disc reference axis (see
    ``_in_disc_reference``; the simulation x axis for a spin along z) is
    mapped onto m, fixing the remaining rotation about the spin axis.

    Examples
    --------
    >>> import astropy.units as u
    >>> view = ViewSpec(inclination=0 * u.deg, position_angle=0 * u.deg, orientation="simulation_axes")
    >>> rotation_for_view(view).round(12) + 0.0
    array([[ 0.,  1.,  0.],
           [ 1.,  0.,  0.],
           [ 0.,  0., -1.]])
    """
    if view.orientation == "explicit" or view.orientation == "simulation_axes":
        if spin_axis is not None:
            raise ValueError(f"'spin_axis' is used only with orientation 'angular_momentum'; "
                             f"got one with orientation {view.orientation!r}")
        if view.orientation == "explicit":
            return view.rotation_matrix.copy()
        spin = np.array([0.0, 0.0, 1.0])
    else:
        if spin_axis is None:
            raise ValueError("'spin_axis' must be given for orientation 'angular_momentum' "
                             "(e.g. from angular_momentum_axis); got None")
        spin = _unit_spin_axis(spin_axis)
    inclination = view.inclination.to_value(u.rad)
    position_angle = view.position_angle.to_value(u.rad)
    major_sky = np.array([np.sin(position_angle), np.cos(position_angle), 0.0])
    spin_sky = np.array([np.sin(inclination) * np.cos(position_angle),
                         -np.sin(inclination) * np.sin(position_angle),
                         -np.cos(inclination)])
    major_sim = _in_disc_reference(spin)
    sim_triad = np.column_stack([major_sim, np.cross(spin, major_sim), spin])
    sky_triad = np.column_stack([major_sky, np.cross(spin_sky, major_sky), spin_sky])
    return sky_triad @ sim_triad.T


def orient_chunk(chunk: ParticleChunk, centre_kpc, frame_velocity_kms, rotation) -> ParticleChunk:
    """Move a chunk into the observer frame: shift, subtract the frame velocity, rotate.

    Parameters
    ----------
    chunk : `~pipeline.particles.ParticleChunk`
        Particles in simulation coordinates.
    centre_kpc : numpy.ndarray, shape (3,)
        Galaxy centre in simulation coordinates (kpc).
    frame_velocity_kms : numpy.ndarray, shape (3,)
        Velocity of the galaxy's frame in simulation coordinates (km/s).
    rotation : numpy.ndarray, shape (3, 3)
        From `rotation_for_view`.

    Returns
    -------
    `~pipeline.particles.ParticleChunk`
        The same particles with ``position_kpc = R (r - centre)`` and
        ``velocity_kms = R (v - frame_velocity)``: x east, y north, z away.

    Raises
    ------
    ValueError
        If an argument has the wrong shape.
    """
    centre_kpc = np.asarray(centre_kpc, dtype=np.float64)
    frame_velocity_kms = np.asarray(frame_velocity_kms, dtype=np.float64)
    rotation = np.asarray(rotation, dtype=np.float64)
    for name, value, shape in (("centre_kpc", centre_kpc, (3,)),
                               ("frame_velocity_kms", frame_velocity_kms, (3,)),
                               ("rotation", rotation, (3, 3))):
        if value.shape != shape:
            raise ValueError(f"'{name}' must have shape {shape}; got shape {value.shape}")
    position_kpc = (np.asarray(chunk.position_kpc, dtype=np.float64) - centre_kpc) @ rotation.T
    velocity_kms = (np.asarray(chunk.velocity_kms, dtype=np.float64) - frame_velocity_kms) @ rotation.T
    return chunk.with_frame(position_kpc=np.ascontiguousarray(position_kpc),
                            velocity_kms=np.ascontiguousarray(velocity_kms))
