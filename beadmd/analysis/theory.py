"""Exact and published results to compare measured conformations with.

Each formula names its source; status letters follow ``shared/REFERENCES.md``: **C**
seen in a published text, **D** exact mathematics (derived again here), **M** recalled,
"from memory", not confirmed.

Conventions: d is the spatial dimension (1..4); ``b`` is the root-mean-square bond
length (``b2 = b^2`` the mean-square bond length); form factors are normalised to
``P(0) = 1``; "vector" densities integrate over ``d^dR``, "radial" densities over
``dr`` (the two differ by the sphere area ``S_d r^(d-1)``).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
from scipy.special import gamma as gamma_function

from ..errors import ConfigError

NORMALISATIONS = ("radial", "vector")
_BUDGET = 1 << 22  # elements per temporary array in chunked sums


def _dimension(d) -> int:
    if d not in (1, 2, 3, 4):
        raise ConfigError(f"d = {d!r} is not allowed: one of 1, 2, 3, 4")
    return int(d)


def _non_negative(value, name: str) -> np.ndarray:
    a = np.asarray(value, dtype=np.float64)
    if not np.all(np.isfinite(a)) or np.any(a < 0):
        shown = a if a.size <= 8 else a.ravel()[:8]
        raise ConfigError(f"{name} = {shown!r} is not allowed: finite values >= 0")
    return a


def _positive_scalar(value, name: str) -> float:
    if not (np.ndim(value) == 0 and np.isfinite(value) and value > 0):
        raise ConfigError(f"{name} = {value!r} is not allowed: a finite number > 0")
    return float(value)


def _normalisation(normalisation: str) -> str:
    if normalisation not in NORMALISATIONS:
        raise ConfigError(f"normalisation = {normalisation!r} is not allowed: one of {NORMALISATIONS}")
    return normalisation


# -- geometry ---------------------------------------------------------------------------------
def unit_sphere_area(d: int) -> float:
    """Area ``S_d = 2 pi^(d/2) / Gamma(d/2)`` of the unit sphere in d dimensions (2, 2 pi, 4 pi, 2 pi^2)."""
    if not (isinstance(d, int | np.integer) and d >= 1):
        raise ConfigError(f"d = {d!r} is not allowed: an integer >= 1")
    return float(2.0 * np.pi ** (d / 2) / gamma_function(d / 2))


def unit_ball_volume(d: int) -> float:
    """Volume ``V_d = pi^(d/2) / Gamma(d/2 + 1) = S_d / d`` of the unit ball (2, pi, 4 pi/3, pi^2/2)."""
    return unit_sphere_area(d) / d


# -- ideal chains -------------------------------------------------------------------------------
def ideal_internal_distances(s, b2: float) -> np.ndarray:
    """``<R^2(s)> = s b^2`` for beads s apart along an ideal chain (independent bonds; D).

    Parameters
    ----------
    s : array of any shape
        Separations along the chain (>= 0).
    b2 : float
        Mean-square bond length.
    """
    return _non_negative(s, "s") * _positive_scalar(b2, "b2")


def ideal_end_to_end_squared(n_beads, b2: float) -> np.ndarray:
    """``<Ree^2> = (N - 1) b^2`` of an ideal chain of N beads (independent isotropic bonds; D)."""
    n = _non_negative(n_beads, "n_beads")
    return (n - 1.0) * _positive_scalar(b2, "b2")


def ideal_radius_of_gyration_squared(n_beads, b2: float) -> np.ndarray:
    """``<Rg^2> = b^2 (N^2 - 1) / (6 N)`` of an ideal chain of N beads.

    Exact for N beads joined by independent isotropic bonds of mean-square length b^2,
    in any d (from ``<R^2(s)> = s b^2``: ``Rg^2 = (1/N^2) sum_{i<j} <R_ij^2>``; e.g.
    Rubinstein & Colby, *Polymer Physics*, Oxford 2003, ch. 2; D).
    """
    n = _non_negative(n_beads, "n_beads")
    if np.any(n < 1):
        raise ConfigError(f"n_beads = {n_beads!r} is not allowed: >= 1")
    return _positive_scalar(b2, "b2") * (n * n - 1.0) / (6.0 * n)


# -- form factors ---------------------------------------------------------------------------------
def debye_function(x) -> np.ndarray:
    """Debye function ``P(x) = 2 (exp(-x) - 1 + x) / x^2``, ``x = q^2 Rg^2``, with ``P(0) = 1``.

    Form factor of a continuous Gaussian chain in 3D (P. Debye, 1947, C; journal details,
    J. Phys. Colloid Chem. 51, 18, from memory; D: it is ``int_0^1 int_0^1
    exp(-x |u - v|) du dv``). For other
    dimensions use :func:`gaussian_chain_form_factor`. Below x = 0.1 the series
    ``P = sum_{n>=0} 2 (-x)^n / (n + 2)! = 1 - x/3 + x^2/12 - ...`` (10 terms, error
    < 1e-18) replaces the formula, which loses digits to cancellation there; above,
    ``expm1`` keeps the relative error near 1e-15. ``P(x) -> 2/x`` for large x.

    Parameters
    ----------
    x : array of any shape, >= 0

    Returns
    -------
    ndarray of the shape of x
    """
    x = _non_negative(x, "x")
    small = x < 0.1
    out = np.empty_like(x)
    xs = x[small]
    series = np.zeros_like(xs)
    factorial = [float(np.prod(np.arange(1, n + 3))) for n in range(10)]
    for n in reversed(range(10)):  # Horner in -x of the coefficients 2 / (n + 2)!
        series = series * (-xs) + 2.0 / factorial[n]
    out[small] = series
    xl = x[~small]
    out[~small] = 2.0 * (np.expm1(-xl) + xl) / (xl * xl)
    return out


def gaussian_chain_form_factor(q, radius_of_gyration_squared: float, d: int = 3) -> np.ndarray:
    """Form factor of a continuous Gaussian chain in d dimensions, ``P(0) = 1``.

    A Gaussian vector with ``<r^2> = R^2`` in d dimensions has ``<exp(i q.r)> =
    exp(-q^2 R^2 / (2 d))``; for a continuous chain with ``<Ree^2> = 6 Rg^2`` the double
    integral over the contour gives ``P(q) = debye_function(3 q^2 Rg^2 / d)``, which is
    Debye's ``x = q^2 Rg^2`` in 3D (D).

    Parameters
    ----------
    q : array of any shape, >= 0
    radius_of_gyration_squared : float
    d : int

    Returns
    -------
    ndarray of the shape of q
    """
    d = _dimension(d)
    q = _non_negative(q, "q")
    rg2 = _positive_scalar(radius_of_gyration_squared, "radius_of_gyration_squared")
    return debye_function(3.0 * q * q * rg2 / d)


def discrete_gaussian_chain_form_factor(q, n_beads: int, b: float, d: int) -> np.ndarray:
    """Exact form factor of a discrete Gaussian chain, ``P(0) = 1``.

    ``P(q) = (1/N^2) sum_{i,j} exp(-q^2 b^2 |i - j| / (2 d))
    = (1/N^2) [N + 2 sum_{s=1}^{N-1} (N - s) exp(-q^2 b^2 s / (2 d))]``.

    In d dimensions a Gaussian bond of mean-square length b^2 has variance b^2/d per
    component, so ``<exp(i q.r)> = exp(-q^2 b^2 / (2 d))``, and s independent bonds
    multiply (D; in 3D this is REFERENCES.md's ``exp(-q^2 b^2 |i-j| / 6)``). The sum is
    done term by term (no closed form, which cancels badly at small q), ``O(N)`` per q.

    Parameters
    ----------
    q : array of any shape, >= 0
    n_beads : int
        N >= 1.
    b : float
        Root-mean-square bond length.
    d : int

    Returns
    -------
    ndarray of the shape of q
    """
    d = _dimension(d)
    q = _non_negative(q, "q")
    if not (isinstance(n_beads, int | np.integer) and n_beads >= 1):
        raise ConfigError(f"n_beads = {n_beads!r} is not allowed: an integer >= 1")
    b = _positive_scalar(b, "b")
    n = int(n_beads)
    t = (q.ravel() ** 2) * (b * b / (2.0 * d))
    total = np.full(t.shape, float(n))
    chunk = max(1, _BUDGET // max(t.size, 1))
    for s0 in range(1, n, chunk):
        s = np.arange(s0, min(n, s0 + chunk), dtype=np.float64)
        total += 2.0 * (np.exp(-np.multiply.outer(t, s)) @ (n - s))
    return (total / (n * n)).reshape(q.shape)


# -- end-to-end distributions -------------------------------------------------------------------
def gaussian_end_to_end_pdf(r, mean_square: float, d: int, *, normalisation: str) -> np.ndarray:
    """End-to-end distribution of an ideal (Gaussian) chain.

    ``"vector"``: ``P(R) = (d / (2 pi <R^2>))^(d/2) exp(-d r^2 / (2 <R^2>))``, the density
    of the vector R at ``|R| = r`` (``integral P d^dR = 1``); ``"radial"``: ``p(r) = S_d
    r^(d-1) P(R)`` (``integral p dr = 1``; in 3D ``4 pi r^2 P``). Exact for a sum of
    independent Gaussian bonds, and the large-N limit for any ideal chain (central
    limit theorem; D). Equivalently ``|R| sqrt(d / <R^2>)`` has the chi distribution
    with d degrees of freedom.

    Parameters
    ----------
    r : array of any shape, >= 0
    mean_square : float
        ``<R^2>``.
    d : int
    normalisation : {"radial", "vector"}

    Returns
    -------
    ndarray of the shape of r
    """
    d = _dimension(d)
    r = _non_negative(r, "r")
    ms = _positive_scalar(mean_square, "mean_square")
    vector = (d / (2.0 * np.pi * ms)) ** (d / 2) * np.exp(-d * r * r / (2.0 * ms))
    if _normalisation(normalisation) == "vector":
        return vector
    return unit_sphere_area(d) * r ** (d - 1) * vector


def des_cloizeaux_constants(d: int, nu: float, theta: float) -> tuple[float, float, float]:
    """Constants ``(K, D, delta)`` of ``f(x) = K x^theta exp(-(D x)^delta)``.

    ``delta = 1 / (1 - nu)`` (Fisher, J. Chem. Phys. 44, 616, 1966; C/M). K and D follow
    from ``integral f d^dx = 1`` and ``integral x^2 f d^dx = 1`` (D): with
    ``integral_0^inf x^(a-1) exp(-(D x)^delta) dx = Gamma(a/delta) / (delta D^a)``,

    ``D^2 = Gamma((d + theta + 2) / delta) / Gamma((d + theta) / delta)``,
    ``K = delta D^(d + theta) / (S_d Gamma((d + theta) / delta))``.

    Parameters
    ----------
    d : int
    nu : float
        Size exponent, 0 < nu < 1.
    theta : float
        Small-distance exponent, ``d + theta > 0``.

    Returns
    -------
    (K, D, delta) : tuple of float
    """
    d = _dimension(d)
    if not (np.ndim(nu) == 0 and 0.0 < nu < 1.0):
        raise ConfigError(f"nu = {nu!r} is not allowed: a number with 0 < nu < 1")
    if not (np.ndim(theta) == 0 and np.isfinite(theta) and d + theta > 0):
        raise ConfigError(f"theta = {theta!r} is not allowed: a finite number with d + theta > 0 (d = {d})")
    delta = 1.0 / (1.0 - nu)
    a = d + theta
    big_d = float(np.sqrt(gamma_function((a + 2.0) / delta) / gamma_function(a / delta)))
    k = float(delta * big_d**a / (unit_sphere_area(d) * gamma_function(a / delta)))
    return k, big_d, delta


def des_cloizeaux_end_to_end_pdf(x, d: int, nu: float, theta: float, *, normalisation: str) -> np.ndarray:
    """End-to-end distribution of a self-avoiding chain in the scaling form.

    ``f(x) = K x^theta exp(-(D x)^delta)``, ``x = R / <R^2>^(1/2)``, ``delta = 1/(1 - nu)``
    (M. E. Fisher, J. Chem. Phys. 44, 616, 1966), ``theta = (gamma - 1)/nu`` at small x
    (J. des Cloizeaux, Phys. Rev. A 10, 1665, 1974; see :func:`des_cloizeaux_theta`);
    relations C/M, constants D (see :func:`des_cloizeaux_constants`). ``nu = 1/2,
    theta = 0`` is the Gaussian with ``<x^2> = 1``.

    Parameters
    ----------
    x : array of any shape, >= 0
        Reduced distance.
    d : int
    nu : float
    theta : float
    normalisation : {"radial", "vector"}
        ``"vector"``: f itself, ``integral f d^dx = 1``; ``"radial"``: ``S_d x^(d-1) f``,
        ``integral ... dx = 1``.

    Returns
    -------
    ndarray of the shape of x
    """
    k, big_d, delta = des_cloizeaux_constants(d, nu, theta)
    x = _non_negative(x, "x")
    with np.errstate(divide="ignore"):  # x = 0 with theta < 0 is an integrable infinity
        vector = k * x**theta * np.exp(-((big_d * x) ** delta))
    if _normalisation(normalisation) == "vector":
        return vector
    return unit_sphere_area(d) * x ** (d - 1) * vector


def des_cloizeaux_theta(gamma: float, nu: float) -> float:
    """``theta = (gamma - 1) / nu``, the end-to-end small-distance exponent (des Cloizeaux 1974; C/M).

    3D (Clisby's exponents): 0.26711; 2D: (43/32 - 1) / (3/4) = 11/24.
    """
    return (float(gamma) - 1.0) / float(nu)


# -- exponents -------------------------------------------------------------------------------------
def flory_exponent(d: int) -> float:
    """Flory's size exponent ``nu = 3 / (d + 2)``: 1, 3/4, 3/5, 1/2 for d = 1..4.

    P. J. Flory, *Principles of Polymer Chemistry* (Cornell 1953). It happens to be exact
    in d = 1 (a self-avoiding walk is straight), d = 2 (Nienhuis 1982) and d = 4 (mean
    field, up to logarithms); in 3D it is 0.6 against 0.587597(7). Above d = 4 it falls
    below the true mean-field 1/2 and is wrong. See :data:`SELF_AVOIDING_WALK_EXPONENTS`.

    Parameters
    ----------
    d : int
        Dimension >= 1.
    """
    if not (isinstance(d, int | np.integer) and d >= 1):
        raise ConfigError(f"d = {d!r} is not allowed: an integer dimension >= 1")
    return 3.0 / (d + 2.0)


@dataclass(frozen=True)
class Exponent:
    """A critical exponent with its uncertainty and where it comes from.

    Attributes
    ----------
    value : float
    error : float
        One standard error in the value's units; 0 when exact.
    exact : bool
    source : str
    status : str
        REFERENCES.md status: "C" published, "D" exact mathematics, "M" from memory.
    """

    value: float
    error: float
    exact: bool
    source: str
    status: str


_EXACT_1D = "exact: the only self-avoiding walks in 1D are the two straight ones (c_N = 2 for all N)"
_UPPER_CRITICAL = (
    "upper critical dimension d = 4: mean-field value with logarithmic corrections; "
    "mean field proved for d >= 5, T. Hara & G. Slade (1992)"
)

#: Best-known exponents of the self-avoiding walk, ``{d: {"nu": Exponent, "gamma": ...}}``
#: (read-only). ``nu``: ``<R^2> ~ N^(2 nu)``; ``gamma``: number of walks ``~ mu^N N^(gamma-1)``;
#: ``delta1`` (3D): leading correction-to-scaling exponent.
SELF_AVOIDING_WALK_EXPONENTS = MappingProxyType(
    {
        1: MappingProxyType(
            {
                "nu": Exponent(1.0, 0.0, True, _EXACT_1D, "D"),
                "gamma": Exponent(1.0, 0.0, True, _EXACT_1D, "D"),
            }
        ),
        2: MappingProxyType(
            {
                "nu": Exponent(0.75, 0.0, True, "B. Nienhuis, Phys. Rev. Lett. 49, 1062 (1982)", "C"),
                "gamma": Exponent(
                    43.0 / 32.0, 0.0, True, "B. Nienhuis, Phys. Rev. Lett. 49, 1062 (1982)", "C"
                ),
            }
        ),
        3: MappingProxyType(
            {
                "nu": Exponent(
                    0.587597, 0.000007, False, "N. Clisby, Phys. Rev. Lett. 104, 055702 (2010)", "C"
                ),
                "gamma": Exponent(
                    1.15695300, 0.00000095, False, "N. Clisby, J. Phys. A 50, 264003 (2017)", "C"
                ),
                "delta1": Exponent(
                    0.528, 0.008, False, "quoted in N. Clisby, J. Phys. A 50, 264003 (2017)", "C"
                ),
            }
        ),
        4: MappingProxyType(
            {
                # <R^2> ~ N (ln N)^(1/4): E. Brezin, J. C. Le Guillou & J. Zinn-Justin (1973), proved for
                # the hierarchical model by D. C. Brydges & J. Z. Imbrie (arXiv math-ph/0205027, 2002);
                # see beadmd.studies.dimensions. c_N ~ mu^N (ln N)^(1/4): from memory.
                "nu": Exponent(0.5, 0.0, True, _UPPER_CRITICAL, "C"),
                "gamma": Exponent(1.0, 0.0, True, _UPPER_CRITICAL + " (gamma = 1 from memory)", "M"),
            }
        ),
    }
)
