"""Designs and distributions of a study: unit-cube points and the values they stand for.

A study varies ``d`` dimensions. Every design first makes points ``u`` in the unit cube
[0, 1)^d, one row per sample, and each dimension maps its column to a value through the inverse
of its cumulative distribution (``ppf``): x = F^-1(u). That one step serves every design:

- ``monte_carlo``: independent uniform points; row ``i`` comes from its own random stream,
  ``numpy.random.SeedSequence(seed, spawn_key=(i,))``, so a sample's values depend only on
  (seed, i), never on how many samples, workers or chunks there are.
- ``lhs``: a Latin hypercube of n points (McKay, Beckman & Conover 1979, Technometrics 21,
  239-245), made by ``scipy.stats.qmc.LatinHypercube`` from the seed: each column is stratified
  into n equal intervals, one point per interval.
- ``sobol``: a scrambled Sobol sequence (Sobol' 1967, USSR Comput. Math. Math. Phys. 7, 86-112;
  Owen scrambling, ``scipy.stats.qmc.Sobol``) of dimension 2k for k variable groups, arranged
  for Sobol indices after Saltelli et al. (2010, Comput. Phys. Commun. 181, 259-270): base
  matrices A and B (n rows each, n a power of 2) and, for each group j, A with the columns of
  group j taken from B (A_B^j); n (k + 2) samples in the order A, B, A_B^1 ... A_B^k.
- ``grid``: every combination of the sweep levels (full factorial), each combination repeated
  for ``replicas`` Monte Carlo draws of the uncertain dimensions; replica r uses the same draw
  at every grid point (common random numbers), from ``SeedSequence(seed, spawn_key=(r,))``.

Distributions (parameters as stated in the case file; scipy.stats underneath):
normal(mean, sd); lognormal(median, sigma) with ln x ~ N(ln median, sigma^2); uniform(lo, hi);
triangular(lo, peak, hi). A correlated block is a multivariate normal N(mean, C) over named
parameters: x = mean + L z with C = L L^T (Cholesky; a positive semi-definite C of a fit is
factored through its eigen-decomposition) and z_k = Phi^-1(u_k) (Rubinstein & Kroese,
*Simulation and the Monte Carlo Method*, 3rd ed., Wiley 2017, sec. 4.3; from memory).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = ["DISTRIBUTIONS", "Distribution", "Covariance", "DESIGNS", "unit_rows",
           "sobol_layout", "U_EPS"]

#: Every distribution and the parameters it takes (in this order).
DISTRIBUTIONS: dict[str, tuple[str, ...]] = {
    "normal": ("mean", "sd"),
    "lognormal": ("median", "sigma"),
    "uniform": ("lo", "hi"),
    "triangular": ("lo", "peak", "hi"),
}
#: The designs of a study.
DESIGNS = ("monte_carlo", "lhs", "sobol", "grid")
#: Unit-cube values are kept within [U_EPS, 1 - U_EPS] before the inverse CDF, so that an
#: unbounded distribution never maps a point on the cube's face to an infinite value.
U_EPS = 1e-12


@dataclass(frozen=True)
class Distribution:
    """One distribution with its parameters stated (see the module docstring)."""
    kind: str
    params: tuple[float, ...]

    def _frozen(self):
        from scipy import stats
        p = self.params
        if self.kind == "normal":
            return stats.norm(loc=p[0], scale=p[1])
        if self.kind == "lognormal":
            return stats.lognorm(s=p[1], scale=p[0])
        if self.kind == "uniform":
            return stats.uniform(loc=p[0], scale=p[1] - p[0])
        lo, peak, hi = p
        return stats.triang(c=(peak - lo) / (hi - lo), loc=lo, scale=hi - lo)

    def ppf(self, u):
        """x = F^-1(u) for u in (0, 1)."""
        if self.params[-1] == 0.0 and self.kind in ("normal", "lognormal"):
            # no spread: every sample is the centre (scipy refuses a zero scale)
            return np.full(np.shape(u), float(self.params[0]))
        return self._frozen().ppf(np.clip(u, U_EPS, 1.0 - U_EPS))

    def cdf(self, x):
        """F(x)."""
        return self._frozen().cdf(x)

    @property
    def centre(self) -> float:
        """The median F^-1(0.5)."""
        return float(self.ppf(0.5))


@dataclass(frozen=True)
class Covariance:
    """A multivariate normal over named parameters: ``mean`` [k] and covariance ``matrix``
    [k, k], e.g. the estimate and covariance of a catalyst fit. ``factor()`` gives L with
    C = L L^T; ``values(u)`` maps unit-cube rows [n, k] to parameter values [n, k]."""
    names: tuple[str, ...]
    mean: tuple[float, ...]
    matrix: tuple[tuple[float, ...], ...]

    def factor(self) -> np.ndarray:
        C = np.array(self.matrix, dtype=float)
        try:
            return np.linalg.cholesky(C)
        except np.linalg.LinAlgError:
            w, V = np.linalg.eigh(C)           # semi-definite: C = V diag(w) V^T, w >= 0
            return V * np.sqrt(np.clip(w, 0.0, None))

    def values(self, u) -> np.ndarray:
        from scipy.stats import norm
        z = norm.ppf(np.clip(np.atleast_2d(u), U_EPS, 1.0 - U_EPS))
        return np.asarray(self.mean, dtype=float) + z @ self.factor().T


def mc_row(seed: int, index: int, d: int) -> np.ndarray:
    """The unit-cube point of Monte Carlo sample ``index``: d uniforms from the stream
    ``SeedSequence(seed, spawn_key=(index,))`` (PCG64)."""
    ss = np.random.SeedSequence(int(seed), spawn_key=(int(index),))
    return np.random.Generator(np.random.PCG64(ss)).random(d)


@lru_cache(maxsize=8)
def _lhs(seed: int, n: int, d: int) -> np.ndarray:
    from scipy.stats import qmc
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(int(seed))))
    return qmc.LatinHypercube(d=d, seed=rng).random(n)


@lru_cache(maxsize=8)
def _sobol(seed: int, n: int, d: int) -> np.ndarray:
    from scipy.stats import qmc
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(int(seed))))
    return qmc.Sobol(d=2 * d, scramble=True, seed=rng).random_base2(int(math.log2(n)))


def sobol_layout(n: int, groups: list[list[int]]) -> int:
    """Number of samples of a Sobol design with base ``n`` and these variable groups:
    n (k + 2) (Saltelli et al. 2010: A, B and one A_B^j per group)."""
    return n * (len(groups) + 2)


def unit_rows(design: str, seed: int, indices, d: int, *, n: int = 0,
              groups: list[list[int]] | None = None) -> np.ndarray:
    """Unit-cube points [len(indices), d] of the samples ``indices`` of a design.

    ``n``: the number of samples (lhs) or the base n (sobol); ``groups``: the columns of each
    variable group (sobol). ``grid`` designs are laid out by the study (levels and replicas)
    and use ``monte_carlo`` rows for their replicas."""
    idx = np.asarray(list(indices), dtype=np.int64)
    if design == "monte_carlo" or design == "grid":
        return np.array([mc_row(seed, i, d) for i in idx]).reshape(len(idx), d)
    if design == "lhs":
        return _lhs(int(seed), int(n), int(d))[idx]
    if design == "sobol":
        M = _sobol(int(seed), int(n), int(d))
        A, B = M[:, :d], M[:, d:]
        out = np.empty((len(idx), d))
        for r, i in enumerate(idx):
            block, j = divmod(int(i), int(n))
            if block == 0:
                out[r] = A[j]
            elif block == 1:
                out[r] = B[j]
            else:
                row = A[j].copy()
                cols = groups[block - 2]
                row[cols] = B[j, cols]
                out[r] = row
        return out
    raise ValueError(f"unknown design {design!r}")
