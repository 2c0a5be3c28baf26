"""The lid from plate age, fast: a 1-D lookup of isotherm depth against sqrt(age).

A run (and each distinct member setting of an ensemble) asks for the depth of one isotherm of one
cooling model at every cell of every chunk. :func:`lid_lookup` builds, once per (cooling model
with its parameters, isotherm), a :class:`LidLookup` whose :meth:`LidLookup.depth_km` answers
that per cell with a few array operations; the lookups are cached in memory. The exact reference
is :func:`lidmelt.physics._cooling.isotherm_depth_km`.

How the lookup is laid out (lidmelt's own design; the physics is in
:mod:`lidmelt.physics._cooling`):

* The coordinate is s = sqrt(age / Ma). Near the ridge every isotherm deepens as sqrt(age)
  (half-space regime; Turcotte & Schubert 2002, Geodynamics, section 4.15 [from memory]), so in
  s the depth is smooth and close to a straight line, and linear interpolation stays accurate
  down to age 0, where a table in age itself would not (its slope is infinite there).
* Half-space: the depth is exactly a straight line in s, z = c s (c from
  :func:`~lidmelt.physics._cooling.isotherm_depth_km` at 1 Ma), so its lookup is that one slope:
  no nodes, no age range, the same numbers as the reference bit for bit.
* Plate models (GDH1, Parsons & Sclater 1977): nodes uniform in s over 0-:data:`AGE_MAX_MA` Ma,
  whose depths are found by bisection on the plate temperature (:mod:`lidmelt.physics._plate`,
  to 2^-32 of the plate thickness), and linear interpolation between them.

The error bound and how it is held
----------------------------------
The linear interpolant of a smooth z(s) on a step h is off by (s - s_k)(s_k+1 - s) z''(xi) / 2,
largest near the middle of a step, h^2 |z''| / 8 [standard interpolation remainder, e.g.
Burden & Faires, Numerical Analysis, section 3.1; from memory]. The build checks this a
posteriori: it starts with 256 steps, computes the exact depth at every step's midpoint, and
halves the step (the midpoints become nodes) until the worst midpoint error is at most
:data:`MIDPOINT_TARGET_KM` (a quarter of the bound), or the step count reaches 65536. The bound
stated and tested (tests/test_lidlookup.py, at random ages and at all midpoints, 0-400 Ma, for
isotherms from 5 % of Tm up to 1 K below Tm) is :data:`TOLERANCE_KM` = 0.01 km against
:func:`~lidmelt.physics._cooling.isotherm_depth_km`, and the same against a direct root-find.
The worst midpoint errors found [derived, python -m benchmarks.bench_cooling prints them per
model]: GDH1 1100 C 0.8 m with 512 steps, 1 K below Tm 1.7 m with 1024 steps.

Edges, the same as the reference: NaN or negative age gives NaN; age 0 gives 0; ages beyond
:data:`AGE_MAX_MA` are passed to :func:`~lidmelt.physics._cooling.isotherm_depth_km` itself
(never clipped). One numpy core evaluates about 100 M ages per second for a plate model
(benchmarks/bench_cooling.py); a lookup takes a few ms to build.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

try:  # compiles the plate lookup's loop; without it the numpy passes below do the same
    import numba
except ImportError:  # pragma: no cover - the numpy path is tested by forcing it
    numba = None

from lidmelt.physics import _plate
from lidmelt.physics._cooling import SECONDS_PER_MA, check_isotherm, check_model, isotherm_depth_km
from lidmelt.physics._cooling_model import CoolingModel
from lidmelt.physics._jitcache import njit

#: Oldest age held by the nodes of a plate lookup [Ma]. The oldest seafloor is younger than
#: 200 Ma (common knowledge); older ages go to the exact function.
AGE_MAX_MA = 400.0
#: Stated and tested bound on |lookup - isotherm_depth_km| for ages in [0, AGE_MAX_MA] [km].
TOLERANCE_KM = 0.01
#: Worst midpoint error the build accepts [km]: a quarter of the bound, leaving room for the
#: error's maximum not being exactly at a midpoint and for the reference's own table error.
MIDPOINT_TARGET_KM = 0.0025
_FIRST_STEPS = 256
_MAX_STEPS = 65536
_BISECTION_STEPS = 32  # 2^-32 of the plate thickness: 2e-8 km for a 95 km plate
_CACHE_SIZE = 4096  # distinct (model, isotherm) lookups kept; one is at most ~1 MB, usually 8 KB


@dataclass(frozen=True, eq=False)
class LidLookup:
    """Isotherm depth against age of one cooling model and isotherm, for fast evaluation.

    Made by :func:`lid_lookup`. ``slope_km`` is the half-space's depth at 1 Ma (depth = slope x
    sqrt(age / Ma)), else None. For a plate, ``base_km[k]`` is the depth at sqrt(age / Ma) =
    k x ``step``, ``rise_km[k]`` = ``base_km[k + 1] - base_km[k]`` (and 0 at the oldest node,
    so that node needs no special case).
    ``midpoint_error_km`` is the worst error found at the steps' midpoints by the build.
    """

    model: CoolingModel
    isotherm_c: float
    slope_km: float | None
    step: float
    base_km: np.ndarray
    rise_km: np.ndarray
    midpoint_error_km: float

    @property
    def age_max_ma(self) -> float:
        """Oldest age the nodes hold [Ma] (infinite for the half-space's exact line)."""
        return math.inf if self.slope_km is not None else AGE_MAX_MA

    def depth_km(self, age_ma: npt.ArrayLike, *, compiled: bool = True) -> np.ndarray:
        """Isotherm depth below the seafloor at these plate ages.

        Parameters
        ----------
        age_ma : array_like
            Plate age, any shape. Units: Ma. NaN or negative gives NaN.

        Returns
        -------
        numpy.ndarray
            Depth, float64, the shape of ``age_ma``. Units: km. Within :data:`TOLERANCE_KM` of
            :func:`~lidmelt.physics._cooling.isotherm_depth_km`; beyond :data:`AGE_MAX_MA` it
            is that function's value. A plate's nodes are read in one compiled loop where
            numba imports (``compiled=False``: the same arithmetic in numpy passes).
        """
        age = np.asarray(age_ma)
        shape = age.shape
        flat = age.reshape(-1)
        if numba is not None and compiled and self.slope_km is None:
            out = np.empty(flat.size)
            outside = np.zeros(flat.size, np.bool_)
            _plate_loop(flat, 1.0 / self.step, self.base_km, self.rise_km, out, outside)
        else:
            with np.errstate(invalid="ignore"):
                s = np.sqrt(flat, dtype=np.float64)  # NaN for negative ages
            if self.slope_km is not None:
                s *= self.slope_km
                return s.reshape(shape)[()]
            out, outside = self._plate_numpy(s)
        if outside.any():
            where = np.flatnonzero(outside)
            old = flat[where]
            out[where] = np.nan
            beyond = old > AGE_MAX_MA  # False for NaN
            if beyond.any():
                out[where[beyond]] = isotherm_depth_km(
                    self.isotherm_c, old[beyond], model=self.model
                )
        return out.reshape(shape)[()]

    def _plate_numpy(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Depths at ``s`` = sqrt(age) (overwritten) and where ``s`` is off the nodes."""
        s *= 1.0 / self.step
        outside = ~(s <= float(self.base_km.size - 1))  # NaN, negative or beyond the nodes
        np.copyto(s, 0.0, where=outside)
        i = s.astype(np.intp)
        s -= i  # fraction within the step
        out = np.take(self.rise_km, i)
        out *= s
        out += np.take(self.base_km, i)
        return out, outside


def _plate_loop(age, inv_step, base, rise, out, outside):
    """:meth:`LidLookup._plate_numpy` cell by cell (the same operations in the same order)."""
    last = base.size - 1
    for n in range(age.size):
        x = np.sqrt(np.float64(age[n])) * inv_step
        if not x <= last:  # NaN, negative or beyond the nodes
            outside[n] = True
            x = 0.0
        i = int(x)
        out[n] = rise[i] * (x - i) + base[i]


if numba is not None:
    _plate_loop = njit(_plate_loop, nogil=True, error_model="numpy")


def lid_lookup(isotherm_c: float, *, model: CoolingModel) -> LidLookup:
    """The (cached) lookup of the depth of ``isotherm_c`` against age in ``model``.

    Parameters
    ----------
    isotherm_c : float
        The lid-base isotherm, in [surface, mantle) temperature of the model. Units: deg C.
    model : CoolingModel
        The cooling model; lookups are cached per (model parameters, isotherm), up to 4096.

    Returns
    -------
    LidLookup

    Raises
    ------
    ModelError
        If the isotherm or the model is not valid (the checks of
        :func:`~lidmelt.physics._cooling.isotherm_depth_km`).

    Examples
    --------
    >>> from lidmelt.physics._cooling import GDH1
    >>> round(float(lid_lookup(1100.0, model=GDH1).depth_km(100.0)), 2)
    68.99
    """
    iso = check_isotherm(isotherm_c, check_model(model))
    if model.kind == "half-space":
        return _half_space(model, iso)
    return _plate_lookup(model, iso)


@functools.lru_cache(maxsize=_CACHE_SIZE)
def _half_space(model: CoolingModel, iso: float) -> LidLookup:
    empty = np.zeros(0)
    return LidLookup(
        model=model,
        isotherm_c=iso,
        slope_km=float(isotherm_depth_km(iso, 1.0, model=model)),
        step=math.inf,
        base_km=empty,
        rise_km=empty,
        midpoint_error_km=0.0,
    )


@functools.lru_cache(maxsize=_CACHE_SIZE)
def _plate_lookup(model: CoolingModel, iso: float) -> LidLookup:
    a_m = model.plate_thickness_km * 1e3
    tau_per_ma = model.diffusivity_m2_s * SECONDS_PER_MA / (a_m * a_m)
    theta_star = (iso - model.surface_temperature_c) / (
        model.mantle_temperature_c - model.surface_temperature_c
    )

    def exact(s: np.ndarray) -> np.ndarray:
        z = np.zeros_like(s)
        if theta_star > 0.0:
            pos = s > 0.0
            tau = s[pos] ** 2 * tau_per_ma
            frac = _plate.isotherm_fraction(theta_star, tau, steps=_BISECTION_STEPS)
            z[pos] = model.plate_thickness_km * frac
        return z

    s_max = math.sqrt(AGE_MAX_MA)
    steps = _FIRST_STEPS
    depth = exact(np.arange(steps + 1) * (s_max / steps))
    while True:
        mid = exact((np.arange(steps) + 0.5) * (s_max / steps))
        error = float(np.max(np.abs(0.5 * (depth[:-1] + depth[1:]) - mid)))
        if error <= MIDPOINT_TARGET_KM or steps >= _MAX_STEPS:
            break
        finer = np.empty(2 * steps + 1)
        finer[0::2] = depth
        finer[1::2] = mid
        depth, steps = finer, 2 * steps
    base = depth
    rise = np.append(np.diff(depth), 0.0)
    base.setflags(write=False)
    rise.setflags(write=False)
    return LidLookup(
        model=model,
        isotherm_c=iso,
        slope_km=None,
        step=s_max / steps,
        base_km=base,
        rise_km=rise,
        midpoint_error_km=error,
    )
