"""Independent reference values for capacitance tests.

Everything here is computed from published closed forms or classical
series/integral equations, using only numpy and scipy.  Nothing in this
module calls into the bem3d solver; only the vacuum permittivity is taken
from :mod:`bem3d.constants` so that both sides use the same constant.

All inputs are lengths in metres and all outputs are in farads.  Two-conductor
results are returned as the 2x2 Maxwell capacitance matrix ``C`` with
``Q = C @ V`` (diagonal entries positive, off-diagonal entries negative).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from bem3d.base.constants import EPS0

__all__ = [
    "EPS0",
    "isolated_sphere",
    "thin_disk",
    "cube_capacitance",
    "CUBE_NORMALISED",
    "sphere_in_shell",
    "two_spheres",
    "two_spheres_images",
    "coaxial_disks",
    "coaxial_disks_auto_n",
    "richardson",
]

#: Capacitance of the unit cube in units of 4*pi*eps0*L
#: (Hwang & Mascagni 2003, J. Korean Phys. Soc. 42, random-walk estimate).
CUBE_NORMALISED = 0.660683


def _positive(name: str, value: float) -> float:
    value = float(value)
    if not (value > 0.0 and math.isfinite(value)):
        raise ValueError(f"{name} must be a positive finite length, got {value!r}")
    return value


# ---------------------------------------------------------------------------
# Single conductors
# ---------------------------------------------------------------------------

def isolated_sphere(a: float) -> float:
    """Capacitance of an isolated conducting sphere of radius ``a``: 4*pi*eps0*a."""
    a = _positive("a", a)
    return 4.0 * math.pi * EPS0 * a


def thin_disk(a: float) -> float:
    """Capacitance of an isolated infinitely thin conducting disk of radius ``a``.

    Classical result C = 8*eps0*a (the oblate-spheroid formula in the limit of
    zero thickness).
    """
    a = _positive("a", a)
    return 8.0 * EPS0 * a


def cube_capacitance(L: float) -> float:
    """Capacitance of an isolated conducting cube of edge ``L``.

    C = 0.660683 * 4*pi*eps0*L (Hwang & Mascagni 2003, J. Korean Phys. Soc. 42).
    Other published estimates (about 0.6606785) agree to ~1e-5 relative, so
    this value should not be used with a tolerance tighter than ~2e-5.
    """
    L = _positive("L", L)
    return CUBE_NORMALISED * 4.0 * math.pi * EPS0 * L


# ---------------------------------------------------------------------------
# Concentric spheres
# ---------------------------------------------------------------------------

def sphere_in_shell(a: float, b: float) -> np.ndarray:
    """Maxwell matrix of a sphere (radius ``a``, conductor 1) inside a concentric
    thin spherical shell (radius ``b > a``, conductor 2), in free space.

    C11 = 4 pi eps0 a b / (b - a), C12 = C21 = -C11, C22 = C11 + 4 pi eps0 b.
    """
    a = _positive("a", a)
    b = _positive("b", b)
    if not b > a:
        raise ValueError("shell radius b must exceed sphere radius a")
    k = 4.0 * math.pi * EPS0
    c11 = k * a * b / (b - a)
    return np.array([[c11, -c11], [-c11, c11 + k * b]])


# ---------------------------------------------------------------------------
# Two spheres
# ---------------------------------------------------------------------------

def _sinh_ratio(beta: float, m: np.ndarray) -> np.ndarray:
    """sinh(beta)/sinh(m*beta) without overflow for large m*beta."""
    m = np.asarray(m, dtype=float)
    return np.exp(-(m - 1.0) * beta) * (-np.expm1(-2.0 * beta)) / (-np.expm1(-2.0 * m * beta))


def two_spheres(a: float, c: float, terms: int | None = None) -> np.ndarray:
    """Maxwell matrix of two equal conducting spheres (radius ``a``, centre
    distance ``c > 2a``) from the bispherical-coordinate series
    (Smythe, Static and Dynamic Electricity, 1950):

        cosh(beta) = c / (2a)
        C11 = C22 =  4 pi eps0 a sinh(beta) sum_{n>=1} 1/sinh((2n-1) beta)
        C12 = C21 = -4 pi eps0 a sinh(beta) sum_{n>=1} 1/sinh(2n beta)

    ``terms`` is the number of terms of each sum; by default enough are taken
    that the neglected tail is below 1e-17 relative.
    """
    a = _positive("a", a)
    c = _positive("c", c)
    if not c > 2.0 * a:
        raise ValueError("spheres overlap or touch: need c > 2a")
    beta = math.acosh(c / (2.0 * a))
    if terms is None:
        # term n behaves like exp(-(2n-2) beta); stop when that is < e^-40.
        terms = int(math.ceil(20.0 / beta)) + 2
    terms = int(terms)
    if terms < 1:
        raise ValueError("terms must be >= 1")
    n = np.arange(terms, 0, -1, dtype=float)  # small terms first for accuracy
    s_odd = float(np.sum(_sinh_ratio(beta, 2.0 * n - 1.0)))
    s_even = float(np.sum(_sinh_ratio(beta, 2.0 * n)))
    k = 4.0 * math.pi * EPS0 * a
    c11 = k * s_odd
    c12 = -k * s_even
    return np.array([[c11, c12], [c12, c11]])


def _images_column(r_src: float, r_oth: float, c: float, rtol: float,
                   max_images: int) -> tuple[float, float]:
    """Charges (Q_src, Q_oth) with the source sphere at 1 V and the other at 0 V.

    The source sphere (radius r_src) is centred at x = 0 and the other
    (radius r_oth) at x = c.  Uses Kelvin's image: a charge q at distance d
    from the centre of a grounded sphere of radius R has image -R q / d at
    distance R^2 / d from the centre, on the line towards q.
    """
    q = 4.0 * math.pi * EPS0 * r_src  # charge at the centre: source at 1 V
    x = 0.0
    q_src = q
    q_oth = 0.0
    for i in range(max_images):
        if i % 2 == 0:
            # charge inside source sphere -> image inside the other sphere
            d = c - x
            q = -r_oth * q / d
            x = c - r_oth * r_oth / d
            q_oth += q
        else:
            # charge inside the other sphere -> image inside the source sphere
            d = x
            q = -r_src * q / d
            x = r_src * r_src / d
            q_src += q
        if abs(q) <= rtol * min(abs(q_src), abs(q_oth)):
            # the next image is smaller again; the series is alternating in
            # position but geometrically decreasing in magnitude
            return q_src, q_oth
    raise RuntimeError("image series did not converge; spheres nearly touching?")


def two_spheres_images(a1: float, a2: float, c: float, rtol: float = 1e-16,
                       max_images: int = 10_000_000) -> np.ndarray:
    """Maxwell matrix of two conducting spheres of radii ``a1``, ``a2`` with
    centre distance ``c > a1 + a2``, by Kelvin's iterated method of images.

    Column j is obtained by holding sphere j at 1 V and the other at 0 V and
    adding images alternately in the two spheres until the last image is
    below ``rtol`` of the accumulated charges.  The two off-diagonal entries
    are computed independently (reciprocity C12 = C21 is not imposed).
    """
    a1 = _positive("a1", a1)
    a2 = _positive("a2", a2)
    c = _positive("c", c)
    if not c > a1 + a2:
        raise ValueError("spheres overlap or touch: need c > a1 + a2")
    c11, c21 = _images_column(a1, a2, c, rtol, max_images)
    c22, c12 = _images_column(a2, a1, c, rtol, max_images)
    return np.array([[c11, c12], [c21, c22]])


# ---------------------------------------------------------------------------
# Two coaxial disks (Love's integral equation)
# ---------------------------------------------------------------------------

def coaxial_disks_auto_n(kappa: float) -> int:
    """Default number of Gauss-Legendre nodes on [-1, 1] for ``coaxial_disks``.

    The kernel kappa/(kappa^2 + (t-s)^2) has poles at distance kappa from the
    real axis, so Gauss-Legendre converges like exp(-2 n kappa); n = 30/kappa
    gives well below 1e-9 relative error (checked by doubling n in the tests
    for kappa >= 0.05).
    """
    n = max(64, int(math.ceil(30.0 / kappa)))
    return n + (n % 2)  # even, so the nodes pair up as +-t


@functools.lru_cache(maxsize=16)
def _gauss_legendre_half(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Non-negative half of the n-point Gauss-Legendre rule on [-1, 1] (n even)."""
    t, w = np.polynomial.legendre.leggauss(n)
    h = n // 2
    tp, wp = t[h:].copy(), w[h:].copy()
    tp.flags.writeable = False
    wp.flags.writeable = False
    return tp, wp


def _love_integral(kappa: float, n: int, sign: float) -> float:
    """Integral over [-1, 1] of the solution f of

        f(t) + sign * (1/pi) * int_{-1}^{1} kappa / (kappa^2 + (t - s)^2) f(s) ds = 1

    by Nystrom's method with n-point Gauss-Legendre quadrature.  The solution
    is even in t, so only the nodes t >= 0 are kept as unknowns.
    """
    tp, wp = _gauss_legendre_half(n)  # positive nodes (n even)
    h = n // 2

    def kern(x):
        return kappa / (kappa * kappa + x * x) / math.pi

    # f(-s) = f(s): fold the contribution of the node -s_j onto the unknown f_j
    K = (kern(tp[:, None] - tp[None, :]) + kern(tp[:, None] + tp[None, :])) * wp[None, :]
    A = np.eye(h) + sign * K
    f = np.linalg.solve(A, np.ones(h))
    return 2.0 * float(wp @ f)


def coaxial_disks(a: float, d: float, n: int | None = None) -> np.ndarray:
    """Maxwell matrix of two equal, coaxial, infinitely thin conducting disks
    of radius ``a`` at separation ``d``, from Love's integral equation
    (Love 1949, Quart. J. Mech. Appl. Math. 2, 428), kappa = d / a:

        f(t) -/+ (1/pi) int_{-1}^{1} kappa/(kappa^2 + (t-s)^2) f(s) ds = 1.

    * minus sign: disks at +V0 and -V0 (antisymmetric); each carries
      Q = 4 eps0 a V0 int f, so  C11 - C12 = 4 eps0 a int f_minus;
    * plus sign: both disks at V0 (symmetric); each carries
      Q = 4 eps0 a V0 int f, so  C11 + C12 = 4 eps0 a int f_plus.

    The normalisation reduces to the single disk (f = 1, Q = 8 eps0 a V0) as
    kappa -> infinity.  The two-terminal capacitance is (C11 - C12) / 2.
    ``n`` is the number of Gauss-Legendre nodes on [-1, 1] (even); by
    default :func:`coaxial_disks_auto_n`.  Converged to 1e-9 relative for
    kappa >= 0.05 with the default n.
    """
    a = _positive("a", a)
    d = _positive("d", d)
    kappa = d / a
    if n is None:
        n = coaxial_disks_auto_n(kappa)
    n = int(n)
    if n < 2 or n % 2:
        raise ValueError("n must be an even integer >= 2")
    i_anti = _love_integral(kappa, n, -1.0)
    i_sym = _love_integral(kappa, n, +1.0)
    diff = 4.0 * EPS0 * a * i_anti  # C11 - C12
    summ = 4.0 * EPS0 * a * i_sym  # C11 + C12
    c11 = 0.5 * (summ + diff)
    c12 = 0.5 * (summ - diff)
    return np.array([[c11, c12], [c12, c11]])


# ---------------------------------------------------------------------------
# Richardson extrapolation
# ---------------------------------------------------------------------------

def richardson(coarse, fine, ratio: float = 2.0, order: float = 2):
    """Richardson extrapolation assuming error = K * h**order.

    ``coarse`` and ``fine`` are values computed with mesh sizes h_c and h_f,
    ``ratio = h_c / h_f > 1``.  Returns (r**p * fine - coarse) / (r**p - 1).
    Works elementwise on arrays.
    """
    ratio = float(ratio)
    if not ratio > 1.0:
        raise ValueError("ratio = h_coarse / h_fine must exceed 1")
    if not order > 0:
        raise ValueError("order must be positive")
    rp = ratio ** order
    out = (rp * np.asarray(fine, dtype=float) - np.asarray(coarse, dtype=float)) / (rp - 1.0)
    return float(out) if out.ndim == 0 else out
