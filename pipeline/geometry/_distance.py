"""Distances and redshifts of the observed galaxy."""

import dataclasses
import math
import numbers

import astropy.constants as const
import astropy.cosmology
import astropy.units as u

__all__ = ["DistanceSpec", "resolve_distances"]

_C_KMS = const.c.to_value(u.km / u.s)


def _is_finite_number(value) -> bool:
    """True for a finite real number that is not a bool."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool) and math.isfinite(value)


@dataclasses.dataclass(frozen=True, kw_only=True)
class DistanceSpec:
    """Where the galaxy sits: its distances and redshifts.

    Parameters
    ----------
    luminosity_distance : `~astropy.units.Quantity` ['length']
        D_L, for fluxes and masses (S = L / (4 pi D_L^2)).
    angular_diameter_distance : `~astropy.units.Quantity` ['length']
        D_A, for angular sizes (theta = size / D_A).
    redshift : float
        Cosmological redshift (0 for a galaxy placed at a plain distance);
        it sets the cosmological dimming factors.
    systemic_redshift : float
        Total redshift of the galaxy centre, so that the centre's line is seen
        at nu_0 / (1 + systemic_redshift).  Equal to ``redshift`` for a
        cosmological placement, and to cz / c for a nearby galaxy with a
        systemic velocity cz.

    Raises
    ------
    ValueError
        If a distance is not a positive length, ``redshift`` is negative or
        ``systemic_redshift`` is not above -1.
    """

    luminosity_distance: u.Quantity
    angular_diameter_distance: u.Quantity
    redshift: float
    systemic_redshift: float

    def __post_init__(self):
        for name in ("luminosity_distance", "angular_diameter_distance"):
            value = getattr(self, name)
            if not (isinstance(value, u.Quantity) and value.unit.physical_type == "length"
                    and value.isscalar and value.value > 0):
                raise ValueError(f"'{name}' must be a positive length, e.g. '10 Mpc'; got {value!r}")
        if not (_is_finite_number(self.redshift) and self.redshift >= 0):
            raise ValueError(f"'redshift' must be a finite number >= 0; got {self.redshift!r}")
        if not (_is_finite_number(self.systemic_redshift) and self.systemic_redshift > -1):
            raise ValueError(
                f"'systemic_redshift' must be a finite number > -1; got {self.systemic_redshift!r}")
        object.__setattr__(self, "redshift", float(self.redshift))
        object.__setattr__(self, "systemic_redshift", float(self.systemic_redshift))


def _as_cosmology(cosmology):
    """Return an astropy cosmology from a realisation name or an instance."""
    if isinstance(cosmology, astropy.cosmology.Cosmology):
        return cosmology
    available = astropy.cosmology.realizations.available
    if cosmology not in available:
        raise ValueError(
            f"'cosmology' must be an astropy.cosmology realisation, one of {', '.join(available)}, "
            f"or a Cosmology instance; got {cosmology!r}")
    return getattr(astropy.cosmology.realizations, cosmology)


def resolve_distances(*, distance=None, redshift=None, cosmology="Planck18",
                      systemic_velocity=0 * u.km / u.s) -> DistanceSpec:
    """Turn either a plain distance or a cosmological redshift into a `DistanceSpec`.

    Parameters
    ----------
    distance : `~astropy.units.Quantity` ['length'], optional
        Distance of a nearby galaxy; used as both D_L and D_A.
    redshift : float, optional
        Cosmological redshift (> 0); D_L and D_A come from ``cosmology``.
    cosmology : str or `~astropy.cosmology.Cosmology`, optional
        Name of an astropy.cosmology realisation (default ``"Planck18"``) or
        an instance; used only with ``redshift``.
    systemic_velocity : `~astropy.units.Quantity` ['speed'], optional
        Systemic velocity in the optical convention (cz) of a galaxy given by
        ``distance``; sets ``systemic_redshift = v / c``.  Must stay 0 with
        ``redshift`` (the redshift is then the systemic redshift).

    Returns
    -------
    DistanceSpec

    Raises
    ------
    ValueError
        If neither or both of ``distance`` and ``redshift`` are given, a value
        has the wrong kind, or ``systemic_velocity`` is non-zero with ``redshift``.

    Notes
    -----
    With a redshift, D_L = (1 + z) D_C and D_A = D_C / (1 + z) in a flat
    universe (Hogg 1999, astro-ph/9905116), computed by astropy.cosmology.
    With a distance, the galaxy is taken to be near enough that D_L = D_A.

    Examples
    --------
    >>> import astropy.units as u
    >>> spec = resolve_distances(distance=10 * u.Mpc, systemic_velocity=700 * u.km / u.s)
    >>> spec.luminosity_distance, round(spec.systemic_redshift, 8)
    (<Quantity 10. Mpc>, 0.00233495)
    """
    if (distance is None) == (redshift is None):
        raise ValueError(
            "exactly one of 'distance' and 'redshift' must be given (e.g. distance='10 Mpc' "
            f"or redshift=0.05); got distance={distance!r}, redshift={redshift!r}")
    if not (isinstance(systemic_velocity, u.Quantity)
            and systemic_velocity.unit.physical_type == "speed" and systemic_velocity.isscalar):
        raise ValueError(f"'systemic_velocity' must be a velocity, e.g. '700 km/s'; got {systemic_velocity!r}")
    v_sys_kms = float(systemic_velocity.to_value(u.km / u.s))
    if redshift is not None:
        if not (_is_finite_number(redshift) and redshift > 0):
            raise ValueError(
                f"'redshift' must be a number > 0 (give 'distance' for a nearby galaxy); got {redshift!r}")
        if v_sys_kms != 0.0:
            raise ValueError(
                "'systemic_velocity' applies only with 'distance'; with 'redshift' the redshift is "
                f"the systemic redshift; got systemic_velocity={systemic_velocity!r}")
        model = _as_cosmology(cosmology)
        return DistanceSpec(luminosity_distance=model.luminosity_distance(redshift).to(u.Mpc),
                            angular_diameter_distance=model.angular_diameter_distance(redshift).to(u.Mpc),
                            redshift=float(redshift), systemic_redshift=float(redshift))
    if not (isinstance(distance, u.Quantity) and distance.unit.physical_type == "length"
            and distance.isscalar and distance.value > 0):
        raise ValueError(f"'distance' must be a positive length, e.g. '10 Mpc'; got {distance!r}")
    if not -_C_KMS < v_sys_kms < _C_KMS:
        raise ValueError(f"'systemic_velocity' must be slower than light; got {systemic_velocity!r}")
    return DistanceSpec(luminosity_distance=distance, angular_diameter_distance=distance,
                        redshift=0.0, systemic_redshift=v_sys_kms / _C_KMS)
