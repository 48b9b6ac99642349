"""Laminar film mass/heat transfer, friction and entry/exit losses in monolith channels.

Sherwood correlations are pure functions of the Graetz-type axial coordinate
z* = z D / (u d_h^2) = z / (d_h Re Sc)  [-]   (for Nu use Pr in place of Sc).
:func:`sherwood` dispatches by method name (the function name); :func:`sherwood_methods` lists the
choices with their validity; :func:`sherwood_cell_mean` gives exact cell averages on a grid.
Shapes: ``"square"`` (square channel) and ``"slit"`` (parallel plates); ``"circular"`` is known to
the constant tables and the apparent-friction correlation only. All functions take numpy arrays.

References
----------
Shah, R. K. and London, A. L., *Laminar Flow Forced Convection in Ducts*, Academic Press, 1978.
Tronconi, E. and Forzatti, P., AIChE J. 38 (1992) 201-210.
Hawthorn, R. D., AIChE Symp. Ser. 70 (137) (1974) 428-438.
Shah, R. K., J. Fluids Eng. 100 (1978) 177-179.
Rennels, D. C. and Hudson, H. M., *Pipe Flow*, Wiley, 2012.
Kays, W. M. and London, A. L., *Compact Heat Exchangers*, 3rd ed., McGraw-Hill, 1984.
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy.special import gamma as _gamma, gammainc, gammaincc

from .errors import InputError, did_you_mean

__all__ = ["SHAPES", "DuctConstants", "shah_london_1978", "fully_developed",
           "tronconi_forzatti_1992", "hawthorn_1974", "hawthorn_1974_local", "sherwood",
           "sherwood_methods", "sherwood_cell_mean", "friction_factor_fully_developed",
           "shah_1978_apparent_friction", "contraction_rennels", "expansion_borda_carnot",
           "PressureDrop", "pressure_drop"]

SHAPES: tuple[str, ...] = ("square", "slit", "circular")


class DuctConstants(NamedTuple):
    """Fully developed laminar constants: Nu_T (= Sh_T), Nu_H1 and Fanning f*Re [-]."""
    nu_t: float
    nu_h1: float
    f_re: float


# Shah & London (1978) tables (square, parallel plates, circle); values from memory.
_DUCT = {"square": DuctConstants(2.976, 3.608, 14.227),
         "slit": DuctConstants(7.541, 8.235, 24.0),
         "circular": DuctConstants(3.657, 4.364, 16.0)}
# Shah (1978) apparent friction: (K(inf), C); from memory. Slit: K(inf) of Shah & London (1978)
# for parallel plates, from memory -- used only in the long-duct form fRe + K/(4 x+).
_SHAH = {"square": (1.43, 0.00029), "circular": (1.25, 0.00021), "slit": (0.686, None)}
# Tronconi & Forzatti (1992) square channel, constant wall concentration; from memory, verify
# against the paper: Sh = A + B (1000 z*)^-n exp(-k z*).
_TF_A, _TF_B, _TF_N, _TF_K = 2.977, 8.827, 0.545, 48.2
_HW_C, _HW_E = 0.095, 0.45    # Hawthorn (1974): Sh_m = Sh_inf (1 + 0.095/z*)^0.45


def _shape(shape: str, allowed=SHAPES) -> str:
    if shape not in allowed:
        raise InputError(f"expected one of {', '.join(allowed)}{did_you_mean(shape, allowed)}",
                         key="shape", value=shape)
    return shape


def _zstar(z_star) -> np.ndarray:
    z = np.asarray(z_star, dtype=float)
    if np.any(~(z >= 0.0)):   # also catches NaN
        raise InputError("expected z* >= 0", key="z_star", value=z_star)
    return z


def shah_london_1978(shape: str = "square") -> DuctConstants:
    """Fully developed laminar constants for ``shape`` (Shah & London 1978).

    square: Nu_T 2.976, Nu_H1 3.608, fRe 14.227; slit: 7.541, 8.235, 24; circular: 3.657,
    4.364, 16. Fanning friction factor f = fRe/Re. Valid for laminar flow (Re < ~2000).

    References
    ----------
    Shah & London (1978), Laminar Flow Forced Convection in Ducts (values from memory).
    """
    return _DUCT[_shape(shape)]


def fully_developed(z_star=None, shape: str = "square", boundary: str = "T"):
    """Asymptotic Sh (= Nu) for constant wall concentration ("T") or flux ("H1") [-].

    Returns the constant, broadcast to the shape of ``z_star`` when given. Valid for
    z* > ~0.1, where the Tronconi-Forzatti entrance term is below 0.2 % (square).

    References
    ----------
    Shah & London (1978).
    """
    c = shah_london_1978(shape)
    b = _shape(boundary, ("T", "H1"))
    val = c.nu_t if b == "T" else c.nu_h1
    return val if z_star is None else np.full(np.shape(z_star), val)


def tronconi_forzatti_1992(z_star, shape: str = "square"):
    """Local Sh in a square channel with developing concentration profile [-].

    Sh(z*) = 2.977 + 8.827 (1000 z*)^-0.545 exp(-48.2 z*),  z* = z D/(u d_h^2) > 0.
    Fully developed laminar velocity, constant wall concentration (fast-reaction limit; also the
    usual approximation at finite rate). Square channels only: the paper gives no entrance term
    for parallel plates, so ``shape="slit"`` raises (use ``hawthorn_1974`` or
    ``fully_developed``). Constants from memory -- verify against the paper.

    References
    ----------
    Tronconi, E. and Forzatti, P., AIChE J. 38 (1992) 201-210.
    """
    _shape(shape, ("square",))
    z = _zstar(z_star)
    with np.errstate(divide="ignore"):
        return _TF_A + _TF_B * (1000.0 * z) ** (-_TF_N) * np.exp(-_TF_K * z)


def _tf_entrance_between(z0, z1):
    """Exact integral of the T-F entrance term over [z0, z1] via the incomplete gamma function:
    int z^(a-1) e^(-k z) dz = k^-a Gamma(a) P(a, k z), a = 1 - n = 0.455. The regularised
    upper function Q is used where P is near 1, to keep thin cells free of cancellation."""
    a = 1.0 - _TF_N
    c = _TF_B * 1000.0 ** (-_TF_N) * _TF_K ** (-a) * _gamma(a)
    x0, x1 = _TF_K * z0, _TF_K * z1
    lower = gammainc(a, x1) - gammainc(a, x0)
    upper = gammaincc(a, x0) - gammaincc(a, x1)
    return c * np.where(x0 > 1.0, upper, lower)


def _tf_entrance_cells(z):
    """:func:`_tf_entrance_between` over consecutive edges ``z`` [n+1, ...] (result [n, ...]),
    with P and Q evaluated once per edge instead of twice per cell (same formula)."""
    a = 1.0 - _TF_N
    c = _TF_B * 1000.0 ** (-_TF_N) * _TF_K ** (-a) * _gamma(a)
    x = _TF_K * z
    P, Q = gammainc(a, x), gammaincc(a, x)
    return c * np.where(x[:-1] > 1.0, Q[:-1] - Q[1:], P[1:] - P[:-1])


def hawthorn_1974(Re, Sc, d_h, L, shape: str = "square"):
    """Length-averaged Sh over [0, L] for laminar flow [-].

    Sh_m = Sh_inf (1 + 0.095 Re Sc d_h / L)^0.45 = Sh_inf (1 + 0.095/z*_L)^0.45, with
    Sh_inf = Nu_T of ``shape`` (Shah & London 1978). Re [-], Sc [-] (Pr for Nu), d_h, L [m].
    Valid for laminar flow (Re < ~2000) in square or slit channels.

    References
    ----------
    Hawthorn, R. D., AIChE Symp. Ser. 70 (137) (1974) 428-438.
    """
    sh_inf = shah_london_1978(_shape(shape, ("square", "slit"))).nu_t
    inv = np.asarray(Re, float) * np.asarray(Sc, float) * np.asarray(d_h, float) / np.asarray(
        L, float)
    return sh_inf * (1.0 + _HW_C * inv) ** _HW_E


def _hawthorn_integral(z, shape):
    """z* Sh_m(z*) = Sh_inf z^0.55 (z + 0.095)^0.45 (zero at z* = 0)."""
    sh_inf = shah_london_1978(_shape(shape, ("square", "slit"))).nu_t
    return sh_inf * z ** (1.0 - _HW_E) * (z + _HW_C) ** _HW_E


def hawthorn_1974_local(z_star, shape: str = "square"):
    """Local Sh consistent with Hawthorn's mean: d(z* Sh_m)/dz* [-].

    Sh(z*) = Sh_inf (1 + 0.095/z*)^0.45 [0.55 + 0.45 z*/(z* + 0.095)].

    References
    ----------
    Hawthorn (1974); the derivative is ours (exact consequence of the mean form).
    """
    z = _zstar(z_star)
    sh_inf = shah_london_1978(_shape(shape, ("square", "slit"))).nu_t
    with np.errstate(divide="ignore", invalid="ignore"):
        r = z / (z + _HW_C)
        return np.where(z > 0, sh_inf * r ** (-_HW_E) * (1.0 - _HW_E + _HW_E * r), np.inf)


_METHODS = {
    "tronconi_forzatti_1992": "square channels only; laminar, fully developed velocity, "
                              "developing concentration; z* > 0 (Tronconi & Forzatti 1992)",
    "hawthorn_1974": "square or slit; laminar (Re < ~2000); z* > 0 (Hawthorn 1974)",
    "fully_developed": "square or slit; z* > ~0.1 (Shah & London 1978)",
}


def sherwood_methods() -> dict[str, str]:
    """Valid ``method`` names for :func:`sherwood` with their validity ranges."""
    return dict(_METHODS)


def _method(method: str) -> str:
    if method not in _METHODS:
        raise InputError(f"expected one of {', '.join(_METHODS)}{did_you_mean(method, _METHODS)}",
                         key="method", value=method)
    return method


def _integral(method, z, shape):
    """int_0^z Sh dz* for the method (exact)."""
    if method == "tronconi_forzatti_1992":
        _shape(shape, ("square",))
        return _TF_A * z + _tf_entrance_between(np.zeros_like(z), z)
    if method == "hawthorn_1974":
        return _hawthorn_integral(z, shape)
    return fully_developed(shape=shape) * z


def sherwood(method: str, z_star, *, shape: str = "square", average: bool = False):
    """Sh by ``method`` at z* (local) or averaged over [0, z*] (``average=True``) [-].

    Methods and validity: :func:`sherwood_methods`. Arrays of any shape.
    """
    m, z = _method(method), _zstar(z_star)
    if not average:
        if m == "tronconi_forzatti_1992":
            return tronconi_forzatti_1992(z, shape)
        if m == "hawthorn_1974":
            return hawthorn_1974_local(z, shape)
        return fully_developed(z, shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(z > 0, _integral(m, z, shape) / z, np.inf if m != "fully_developed"
                        else fully_developed(shape=shape))


def sherwood_cell_mean(method: str, z_star_edges, *, shape: str = "square"):
    """Mean of the local Sh over each cell [z*_j, z*_{j+1}] of a finite-volume grid [-].

    (1/(z_{j+1} - z_j)) int Sh dz*, computed exactly: incomplete gamma function for
    Tronconi-Forzatti (integrable z*^-0.545 singularity at 0), differences of z* Sh_m(z*) for
    Hawthorn. ``z_star_edges`` has shape (n+1, ...) (e.g. edges x species), nondecreasing
    along axis 0; the result has shape (n, ...). A zero-width cell gets the local value.
    """
    m, z = _method(method), _zstar(z_star_edges)
    if z.ndim == 0 or z.shape[0] < 2:
        raise InputError("expected at least two cell edges along axis 0", key="z_star_edges",
                         value=np.shape(z_star_edges))
    z0, z1 = z[:-1], z[1:]
    dz = z1 - z0
    if np.any(dz < 0):
        raise InputError("expected nondecreasing edges along axis 0", key="z_star_edges")
    if m == "tronconi_forzatti_1992":
        _shape(shape, ("square",))
        num = _TF_A * dz + _tf_entrance_cells(z)
    else:
        num = _integral(m, z1, shape) - _integral(m, z0, shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(dz > 0, num / np.where(dz > 0, dz, 1.0), sherwood(m, z0, shape=shape))


# --- friction and entry/exit losses ----------------------------------------------------------
def friction_factor_fully_developed(Re, shape: str = "square"):
    """Fanning friction factor f = (fRe)/Re, laminar (Re < ~2000) [-] (Shah & London 1978)."""
    return shah_london_1978(shape).f_re / np.asarray(Re, dtype=float)


def shah_1978_apparent_friction(x_plus, shape: str = "square"):
    """Apparent Fanning friction times Re over [0, z], developing laminar flow [-].

    f_app Re = 3.44/sqrt(x+) + (fRe + K/(4 x+) - 3.44/sqrt(x+)) / (1 + C x+^-2),
    x+ = z/(d_h Re). square: fRe 14.227, K(inf) 1.43, C 0.00029; circular: 16, 1.25, 0.00021
    (constants from memory). slit: long-duct form fRe + K(inf)/(4 x+), fRe 24, K(inf) 0.686
    (Shah & London 1978, from memory), valid beyond the entrance (x+ > ~0.01).
    Tends to fRe as x+ -> inf.

    References
    ----------
    Shah, R. K., J. Fluids Eng. 100 (1978) 177-179; Shah & London (1978).
    """
    x = np.asarray(x_plus, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(x > 0, _apparent_g(x, _shape(shape)) / x, np.inf)


def _apparent_g(x, shape):
    """x+ f_app Re(x+), finite at 0 (zero there): the cumulative friction function."""
    f_re = _DUCT[shape].f_re
    k, c = _SHAH[shape]
    if c is None:
        return np.where(x > 0, f_re * x + k / 4.0, 0.0)
    s = np.sqrt(x)
    return 3.44 * s + (f_re * x + k / 4.0 - 3.44 * s) * x * x / (x * x + c)


def contraction_rennels(ofa):
    """Sharp-edged contraction loss K_c referred to the channel velocity [-].

    K = 0.0696 (1 - beta^5) lambda^2 + (lambda - 1)^2,
    lambda = 1 + 0.622 (1 - 0.215 beta^2 - 0.785 beta^5), beta^2 = OFA (area ratio).

    References
    ----------
    Rennels, D. C. and Hudson, H. M., Pipe Flow, Wiley, 2012 (sudden contraction).
    """
    b2 = np.asarray(ofa, dtype=float)
    b5 = b2 ** 2.5
    lam = 1.0 + 0.622 * (1.0 - 0.215 * b2 - 0.785 * b5)
    return 0.0696 * (1.0 - b5) * lam ** 2 + (lam - 1.0) ** 2


def expansion_borda_carnot(ofa):
    """Sudden-expansion loss K_e = (1 - OFA)^2 referred to the channel velocity [-]
    (Borda-Carnot; e.g. Kays & London 1984)."""
    return (1.0 - np.asarray(ofa, dtype=float)) ** 2


class PressureDrop(NamedTuple):
    """Static-pressure losses over a brick [Pa]; positive = pressure falls in the flow direction.
    ``outlet_Pa`` is normally negative (pressure recovery); total = sum of the four."""
    inlet_Pa: float
    friction_Pa: float
    acceleration_Pa: float
    outlet_Pa: float
    total_Pa: float


def pressure_drop(d_h, ofa, shape, length, mass_flow, frontal_area, rho, mu, *,
                  apparent: bool = True, z_edges=None) -> PressureDrop:
    """Pressure drop over a brick: entry contraction, friction, acceleration, exit expansion.

    Channel mass flux G = m/(A sigma) [kg/(m^2 s)], u = G/rho, Re = G d_h/mu. Per cell j
    (width dz_j, properties rho_j, mu_j [kg/m^3, Pa s]):
      fully developed: dp_j = 2 fRe mu_j u_j dz_j / d_h^2       (= 2 f rho u^2 dz/d_h)
      apparent:        dp_j = 2 rho_j u_j^2 [g(x+_{j+1}) - g(x+_j)], g = x+ f_app Re,
                       x+ accumulated as sum dz/(d_h Re_j) (exact for constant properties).
    Kays & London core form, sigma = OFA, rho_in = rho_0, rho_out = rho_{n-1}:
      inlet  = G^2/(2 rho_in) (1 - sigma^2 + K_c),  K_c by :func:`contraction_rennels`
      accel. = G^2 (1/rho_out - 1/rho_in)
      outlet = -G^2/(2 rho_out) (1 - sigma^2 - K_e),  K_e by :func:`expansion_borda_carnot`
    Inputs: d_h [m], ofa [-], length [m], mass_flow [kg/s], frontal_area [m^2] (walls included),
    rho and mu scalars or per-cell arrays; ``z_edges`` [m] (n+1) default uniform over length.
    Laminar flow only (Re < ~2000).

    References
    ----------
    Kays & London (1984); Shah & London (1978); Shah (1978); Rennels & Hudson (2012).
    """
    shape = _shape(shape)
    rho, mu = np.atleast_1d(np.asarray(rho, float)), np.atleast_1d(np.asarray(mu, float))
    rho, mu = np.broadcast_arrays(rho, mu)
    for key, v in (("d_h", d_h), ("length", length), ("mass_flow", mass_flow),
                   ("frontal_area", frontal_area), ("rho", rho), ("mu", mu)):
        if np.any(~(np.asarray(v, float) > 0)):
            raise InputError("expected finite values > 0", key=key, value=v)
    if not 0.0 < ofa < 1.0:
        raise InputError("expected 0 < ofa < 1", key="ofa", value=ofa)
    n = rho.shape[0]
    edges = (np.linspace(0.0, length, n + 1) if z_edges is None
             else np.asarray(z_edges, dtype=float))
    if edges.shape != (n + 1,) or np.any(np.diff(edges) <= 0):
        raise InputError(f"expected {n + 1} increasing cell edges", key="z_edges")
    dz = np.diff(edges)
    g_flux = mass_flow / (frontal_area * ofa)
    u = g_flux / rho
    if apparent:
        re = g_flux * d_h / mu
        xp = np.concatenate(([0.0], np.cumsum(dz / (d_h * re))))
        friction = np.sum(2.0 * rho * u ** 2 * np.diff(_apparent_g(xp, shape)))
    else:
        friction = np.sum(2.0 * _DUCT[shape].f_re * mu * u * dz / d_h ** 2)
    s2 = ofa ** 2
    inlet = g_flux ** 2 / (2.0 * rho[0]) * (1.0 - s2 + contraction_rennels(ofa))
    accel = g_flux ** 2 * (1.0 / rho[-1] - 1.0 / rho[0])
    outlet = -g_flux ** 2 / (2.0 * rho[-1]) * (1.0 - s2 - expansion_borda_carnot(ofa))
    vals = [float(v) for v in (inlet, friction, accel, outlet)]
    return PressureDrop(*vals, total_Pa=sum(vals))
