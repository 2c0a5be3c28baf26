"""Finite rotations on the sphere: the plate's motion over the plumes (pure math, no I/O).

Conventions (Cox & Hart 1986, *Plate Tectonics: How It Works*, Blackwell, chapters 4 and 7 on
finite rotations, their addition and stage poles; the rules below recalled from memory and
checked against the book's Tables 7-1 and 7-3 as worked in the documentation of an
open-source plate-kinematics package, tests/test_motion_rotations.py):

- A point is a unit vector of the sphere from its latitude and longitude (geocentric
  spherical coordinates; plate reconstructions treat the Earth as a sphere, common practice).
- A finite rotation (Euler pole latitude and longitude, angle in degrees) turns every point
  about the axis through the pole by the angle, by the right-hand rule: a positive angle is
  anticlockwise seen from above the pole. It is Rodrigues' rotation formula (Rodrigues 1840;
  :func:`rodrigues`), computed here as a :class:`scipy.spatial.transform.Rotation`.
- Rotations compose as "first A, then B" = ``B * A`` (scipy applies the right factor first);
  the inverse turns back by the same angle about the same pole.
- A row of a rotations table is a total rotation R(t): it takes a point of the plate from its
  present position to its position at age t in the plumes' frame; R(0) is the identity.
- The stage rotation from age t1 to age t2 is S = R(t2) R(t1)^-1: it takes the plate's position
  at t1 to its position at t2 (its pole is the stage pole, fixed in the plumes' frame).
  Between two rows the plate turns about that stage pole at a constant angular velocity:
  R(t) = S^f R(t1) with f = (t - t1) / (t2 - t1), S^f the same pole with f times the angle.
- The point of today's plate that lay above a plume at age t (the plume's hotspot track) is
  R(t)^-1 applied to the plume's position at t.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.spatial.transform import Rotation

#: Mean radius of the Earth for distances on the sphere [km]: the IUGG mean radius
#: R1 = 6371.0088 km (Moritz 2000, Geodetic Reference System 1980, J. Geodesy 74, 128), from
#: memory, rounded to 6371.0 km as plate-motion work commonly does.
EARTH_RADIUS_KM = 6371.0


def unit_vectors(lon_deg, lat_deg) -> np.ndarray:
    """Unit vectors (..., 3) of points given by longitude and latitude in degrees."""
    lon, lat = np.broadcast_arrays(np.radians(np.asarray(lon_deg, float)),
                                   np.radians(np.asarray(lat_deg, float)))  # fmt: skip
    cos_lat = np.cos(lat)
    return np.stack([cos_lat * np.cos(lon), cos_lat * np.sin(lon), np.sin(lat)], axis=-1)


def lonlat(xyz) -> tuple[np.ndarray, np.ndarray]:
    """Longitude (-180..180) and latitude of unit vectors (..., 3), degrees."""
    v = np.asarray(xyz, float)
    lon = np.degrees(np.arctan2(v[..., 1], v[..., 0]))
    lat = np.degrees(np.arctan2(v[..., 2], np.hypot(v[..., 0], v[..., 1])))
    return lon, lat


def finite_rotation(pole_lat, pole_lon, angle_deg) -> Rotation:
    """The finite rotation about the Euler pole (degrees) by ``angle_deg`` (right-hand rule:
    positive anticlockwise seen from above the pole); arrays give a stack of rotations.

    Parameters
    ----------
    pole_lat, pole_lon : float or array_like
        The Euler pole [degrees].
    angle_deg : float or array_like
        The rotation angle [degrees].

    Returns
    -------
    scipy.spatial.transform.Rotation
        One rotation, or a stack when the arguments are arrays.

    Examples
    --------
    >>> import numpy as np
    >>> r = finite_rotation(90.0, 0.0, 90.0)  # about the north pole by 90 degrees
    >>> np.round(r.apply([1.0, 0.0, 0.0]), 12) + 0.0
    array([0., 1., 0.])"""
    axis = unit_vectors(pole_lon, pole_lat)
    return Rotation.from_rotvec(np.radians(np.asarray(angle_deg, float))[..., None] * axis)


def pole_and_angle(rotation: Rotation) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Euler pole latitude, longitude and angle (degrees, 0..180) of ``rotation``; the pole of
    the identity is taken as the north pole."""
    vec = np.atleast_2d(rotation.as_rotvec())
    angle = np.linalg.norm(vec, axis=-1)
    axis = np.where(angle[:, None] > 0, vec / np.where(angle > 0, angle, 1.0)[:, None], [0, 0, 1])
    lon, lat = lonlat(axis)
    shape = np.shape(rotation.as_rotvec())[:-1]
    return lat.reshape(shape), lon.reshape(shape), np.degrees(angle).reshape(shape)


def rodrigues(points, axis, angle_deg) -> np.ndarray:
    """Rodrigues' rotation formula: ``points`` (..., 3) turned about the unit ``axis`` by
    ``angle_deg`` (right-hand rule), v cos a + (k x v) sin a + k (k . v)(1 - cos a)."""
    v = np.asarray(points, float)
    k = np.asarray(axis, float) / np.linalg.norm(axis)
    a = np.radians(angle_deg)
    return v * np.cos(a) + np.cross(k, v) * np.sin(a) + k * (v @ k)[..., None] * (1.0 - np.cos(a))


def compose(first: Rotation, then: Rotation) -> Rotation:
    """The finite rotation ``first`` followed by ``then`` (Cox & Hart's addition of rotations)."""
    return then * first


def stage_rotation(r1: Rotation, r2: Rotation) -> Rotation:
    """The stage rotation S = R2 R1^-1 from the plate's position of ``r1`` to that of ``r2``."""
    return r2 * r1.inv()


def rotate_lonlat(rotation: Rotation, lon_deg, lat_deg) -> tuple[np.ndarray, np.ndarray]:
    """Points (degrees) turned by ``rotation``; their longitude and latitude (degrees)."""
    v = unit_vectors(lon_deg, lat_deg)
    shape = v.shape
    return lonlat(rotation.apply(v.reshape(-1, 3)).reshape(shape))


def great_circle_km(lon1, lat1, lon2, lat2, radius_km: float = EARTH_RADIUS_KM) -> np.ndarray:
    """Great-circle distance on a sphere of ``radius_km`` (the angle between the unit
    vectors by atan2 of their cross and dot products, exact at every distance)."""
    a, b = unit_vectors(lon1, lat1), unit_vectors(lon2, lat2)
    cross = np.linalg.norm(np.cross(a, b), axis=-1)
    return radius_km * np.arctan2(cross, np.sum(a * b, axis=-1))


def slerp_positions(ages, lon_deg, lat_deg, times) -> tuple[np.ndarray, np.ndarray]:
    """Positions at ``times`` along the great circles between the rows (``ages`` ascending,
    positions in degrees), at a constant speed between each pair of rows (spherical linear
    interpolation, Shoemake 1985, SIGGRAPH 19, 245; from memory)."""
    ages = np.asarray(ages, float)
    v = unit_vectors(lon_deg, lat_deg)
    t = np.atleast_1d(np.asarray(times, float))
    k = np.clip(np.searchsorted(ages, t, side="right") - 1, 0, max(len(ages) - 2, 0))
    if len(ages) == 1:
        return lonlat(np.broadcast_to(v[0], (*t.shape, 3)))
    a, b = v[k], v[k + 1]
    f = ((t - ages[k]) / (ages[k + 1] - ages[k]))[:, None]
    omega = np.arctan2(np.linalg.norm(np.cross(a, b), axis=-1), np.sum(a * b, axis=-1))[:, None]
    small = omega < 1e-12
    s = np.where(small, 1.0, np.sin(omega))
    out = np.where(
        small,
        a + f * (b - a),
        (np.sin((1 - f) * omega) * a + np.sin(f * omega) * b) / s,
    )
    out /= np.linalg.norm(out, axis=-1, keepdims=True)
    return lonlat(out)


@dataclass(frozen=True, eq=False)
class RotationHistory:
    """The total rotations of one plate at the ages of a rotations table, R(0) the identity.

    Parameters
    ----------
    ages : numpy.ndarray
        The table's ages [Ma], ascending from 0.
    rotations : scipy.spatial.transform.Rotation
        A stack of as many total rotations, the first the identity.

    Notes
    -----
    :meth:`at` interpolates along the stage rotation between the two rows around each time
    (constant angular velocity about the stage pole; module notes).
    """

    ages: np.ndarray
    rotations: Rotation

    @classmethod
    def from_rows(cls, ages: Sequence[float], pole_lat, pole_lon, angle_deg) -> RotationHistory:
        """The history of the rows (at least one; ages ascending, an identity row at age 0 or
        none: the identity at age 0 is added where the rows do not start there)."""
        ages = np.atleast_1d(np.asarray(ages, float))
        rot = finite_rotation(*(np.atleast_1d(v) for v in (pole_lat, pole_lon, angle_deg)))
        if ages[0] > 0.0:
            ages = np.concatenate([[0.0], ages])
            rot = Rotation.concatenate([Rotation.identity(1), rot])
        return cls(ages, rot)

    @property
    def max_age_ma(self) -> float:
        """The oldest age of the table (Ma)."""
        return float(self.ages[-1])

    def at(self, times) -> Rotation:
        """R(t) at each of ``times`` (Ma, within 0..:attr:`max_age_ma`)."""
        t = np.atleast_1d(np.asarray(times, float))
        k = np.clip(np.searchsorted(self.ages, t, side="right") - 1, 0, len(self.ages) - 2)
        t1, t2 = self.ages[k], self.ages[k + 1]
        r1, r2 = self.rotations[k], self.rotations[k + 1]
        stage = stage_rotation(r1, r2).as_rotvec()
        f = np.clip((t - t1) / (t2 - t1), 0.0, 1.0)[:, None]
        return Rotation.from_rotvec(stage * f) * r1

    def track(self, plume_lon, plume_lat, times) -> tuple[np.ndarray, np.ndarray]:
        """The hotspot track: R(t)^-1 applied to the plume's position at each time (degrees;
        ``plume_lon``/``plume_lat`` one position, or one per time for a drifting plume)."""
        t = np.atleast_1d(np.asarray(times, float))
        p = np.array(np.broadcast_to(unit_vectors(plume_lon, plume_lat), (t.size, 3)))
        return lonlat(self.at(t).inv().apply(p))
