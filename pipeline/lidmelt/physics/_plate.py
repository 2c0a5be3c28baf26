"""Dimensionless kernels of the plate cooling model: temperature, subsidence, heat flow, isotherm.

Variables: zeta = z / a (depth over plate thickness), tau = kappa t / a^2 (dimensionless age),
theta = (T - T0) / (Tm - T0). The plate of thickness a has T = T0 at the surface, T = Tm at the
base and T = Tm everywhere at t = 0 (Parsons & Sclater 1977, JGR 82, 803; McKenzie 1967, JGR
[forms from memory]).

The solution is evaluated in two exact forms, chosen by tau: the Fourier series

    theta = zeta + (2/pi) sum_n (1/n) exp(-n^2 pi^2 tau) sin(n pi zeta)

for tau >= 0.1, and the equivalent image (erfc) series for tau < 0.1, which converges in three
terms where the Fourier series would need hundreds or thousands (about 10 a / (pi sqrt(kappa t))
terms [derived]). At the switch both forms are truncated far below double precision (the first
omitted terms are below 1e-40). The image form is the method-of-images solution of the same
boundary value problem (Carslaw & Jaeger, Conduction of Heat in Solids, 1959, section 3.3
[from memory]); its agreement with the Fourier series is checked numerically in
tests/test_cooling.py [derived]. The derivations are in docs/physics.md, section "Lithosphere
from plate age".
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import special

# Dimensionless age tau = kappa t / a^2 at which the plate evaluation switches from the image
# series (below) to the Fourier series (at and above). Truncation at the switch: Fourier term
# n = 11 is exp(-121 pi^2 0.1) ~ 1e-52; image term k = 3 is erfc(6 / (2 sqrt(0.1))) ~ 1e-40.
TAU_SWITCH = 0.1
_FOURIER_TERMS = 10
_IMAGE_TERMS = 3
# The isotherm table runs to tau = 3; beyond, the geotherm is linear to within
# exp(-3 pi^2) ~ 1e-13 of the plate thickness, so the last node is the asymptote.
_TABLE_TAU_MAX = 3.0
_TABLE_NODES = 4097
_BISECTION_STEPS = 60


def _two_forms(
    tau: np.ndarray, image: Callable[..., np.ndarray], fourier: Callable[..., np.ndarray], *args
) -> np.ndarray:
    """``image(*args, tau)`` where tau < TAU_SWITCH, ``fourier(*args, tau)`` elsewhere.

    ``args`` are arrays of the shape of ``tau``, split the same way.
    """
    out = np.empty_like(tau)
    small = tau < TAU_SWITCH
    if small.any():
        out[small] = image(*(a[small] for a in args), tau[small])
    big = ~small
    if big.any():
        out[big] = fourier(*(a[big] for a in args), tau[big])
    return out


# --------------------------------------------------------------------------------------------
# temperature
# --------------------------------------------------------------------------------------------


def _theta_fourier(zeta: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Plate temperature by the Fourier series (McKenzie 1967 [from memory]), for tau >= 0.1.

    theta = zeta + (2/pi) sum_n (1/n) exp(-n^2 pi^2 tau) sin(n pi zeta).
    """
    theta = zeta.copy()
    for n in range(1, _FOURIER_TERMS + 1):
        theta += (
            (2.0 / (math.pi * n)) * np.exp(-(n * n) * math.pi**2 * tau) * np.sin(n * math.pi * zeta)
        )
    return theta


def _theta_images(zeta: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Plate temperature by images, for 0 < tau < 0.1 [derived; Carslaw & Jaeger 1959, from memory].

    1 - theta = sum_k [erfc((2k + zeta) / (2 sqrt(tau))) - erfc((2k + 2 - zeta) / (2 sqrt(tau)))],
    which is 1 at zeta = 0, 0 at zeta = 1 and 0 everywhere inside at tau = 0. The k = 0 term
    alone is the half-space solution.
    """
    inv = 0.5 / np.sqrt(tau)
    u = np.zeros_like(zeta)
    for k in range(_IMAGE_TERMS):
        u += special.erfc((2 * k + zeta) * inv) - special.erfc((2 * k + 2 - zeta) * inv)
    return 1.0 - u


def theta(zeta: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Plate temperature theta for 0 <= zeta <= 1 and tau > 0 (1-D arrays of equal length)."""
    return _two_forms(tau, _theta_images, _theta_fourier, zeta)


# --------------------------------------------------------------------------------------------
# subsidence and heat flow
# --------------------------------------------------------------------------------------------


def _ierfc(x: np.ndarray) -> np.ndarray:
    """First integral of erfc, exp(-x^2)/sqrt(pi) - x erfc(x) (Abramowitz & Stegun 1964, 7.2)."""
    return np.exp(-x * x) / math.sqrt(math.pi) - x * special.erfc(x)


def _subsidence_images(tau: np.ndarray) -> np.ndarray:
    s = 2.0 * np.sqrt(tau)
    acc = np.zeros_like(s)
    for k in range(_IMAGE_TERMS):
        acc += _ierfc(2 * k / s) - 2.0 * _ierfc((2 * k + 1) / s) + _ierfc((2 * k + 2) / s)
    return 2.0 * s * acc


def _subsidence_fourier(tau: np.ndarray) -> np.ndarray:
    acc = np.zeros_like(tau)
    for n in range(1, 2 * _FOURIER_TERMS, 2):
        acc += np.exp(-(n * n) * math.pi**2 * tau) / (n * n)
    return 1.0 - (8.0 / math.pi**2) * acc


def subsidence_fraction(tau: np.ndarray) -> np.ndarray:
    """Subsidence as a fraction of its limit, for tau > 0.

    Fourier form (Parsons & Sclater 1977 [from memory]): 1 - (8/pi^2) sum_{n odd}
    exp(-n^2 pi^2 tau) / n^2. Image form for tau < 0.1 [derived]:
    2 * integral_0^1 (1 - theta) dzeta
    = 2 s sum_k [ierfc(2k/s) - 2 ierfc((2k+1)/s) + ierfc((2k+2)/s)], s = 2 sqrt(tau).
    """
    return _two_forms(tau, _subsidence_images, _subsidence_fourier)


def _heat_flow_images(tau: np.ndarray) -> np.ndarray:
    acc = np.ones_like(tau)
    for k in range(1, _IMAGE_TERMS):
        acc += 2.0 * np.exp(-(k * k) / tau)
    return acc / np.sqrt(math.pi * tau)


def _heat_flow_fourier(tau: np.ndarray) -> np.ndarray:
    acc = np.ones_like(tau)
    for n in range(1, _FOURIER_TERMS + 1):
        acc += 2.0 * np.exp(-(n * n) * math.pi**2 * tau)
    return acc


def heat_flow_factor(tau: np.ndarray) -> np.ndarray:
    """q a / (k (Tm - T0)) for tau > 0.

    Fourier form (Parsons & Sclater 1977 [from memory]): 1 + 2 sum_n exp(-n^2 pi^2 tau). Image
    form for tau < 0.1 (the same theta function after Poisson summation [derived]):
    (1 + 2 sum_k exp(-k^2 / tau)) / sqrt(pi tau).
    """
    return _two_forms(tau, _heat_flow_images, _heat_flow_fourier)


# --------------------------------------------------------------------------------------------
# isotherm depth
# --------------------------------------------------------------------------------------------


def isotherm_fraction(
    theta_star: float, tau: np.ndarray, *, steps: int = _BISECTION_STEPS
) -> np.ndarray:
    """zeta at which theta(zeta, tau) = theta_star, by vectorized bisection (tau > 0).

    theta increases monotonically with zeta in the plate (tested), from 0 at the surface to 1 at
    the base, so the root is unique and bisection on [0, 1] converges to 2^-steps of a (60 by
    default).
    """
    lo = np.zeros_like(tau)
    hi = np.ones_like(tau)
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        above = theta(mid, tau) >= theta_star
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return 0.5 * (lo + hi)


def isotherm_depth_table(
    theta_star: float, tau_per_ma: float, plate_thickness_km: float
) -> tuple[float, np.ndarray]:
    """Isotherm depth (km) on a uniform grid of sqrt(age / Ma); returns (1/step, depths).

    The grid runs from age 0 to the age at which tau = 3, where the geotherm is linear to
    within exp(-3 pi^2) ~ 1e-13 of a; older ages take the last node. Depth is close to linear in
    sqrt(age) at small ages (half-space regime), which keeps linear interpolation accurate.
    The returned depths are read-only.
    """
    s_max = math.sqrt(_TABLE_TAU_MAX / tau_per_ma)
    s = np.linspace(0.0, s_max, _TABLE_NODES)
    depth = np.zeros_like(s)
    if theta_star > 0.0:
        depth[1:] = plate_thickness_km * isotherm_fraction(theta_star, s[1:] ** 2 * tau_per_ma)
    depth.setflags(write=False)
    return (_TABLE_NODES - 1) / s_max, depth
