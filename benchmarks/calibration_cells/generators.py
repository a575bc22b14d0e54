"""Generators of between-sample variation for calibration studies (all synthetic).

Each returns an (n, p) array of counts for samples drawn from ONE law of composition (so a
test of composition or spread between any grouping of them is under its null), with the
totals given. Checking a method on several of them guards against a method that is only
right for the model it was built from.

- ``lognormal``: shares proportional to base_j * exp(sd * Z_ij), Z standard normal per
  sample and taxon (log-normal biology), then multinomial counting at the total.
- ``dirichlet``: Dirichlet-multinomial with intra-class correlation ``icc`` (Mosimann 1962).
- ``gamma_poisson``: independent gamma-Poisson (negative binomial) counts per taxon, mean
  proportional to base_j * total / sum(base), shape ``k``; totals vary around the target.
- ``mixture``: each sample belongs at random to one of two community states (two base
  profiles), equal chance for every sample, then log-normal noise (sd 0.3) and counting.
"""
from __future__ import annotations

import numpy as np

__all__ = ["base_profile", "counts_from", "GENERATORS"]


def base_profile(p: int, rng, *, sd: float = 1.2) -> np.ndarray:
    w = np.sort(rng.lognormal(0.0, sd, p))[::-1]
    return w / w.sum()


def _multinomial(totals, shares, rng):
    shares = shares / shares.sum(axis=1, keepdims=True)
    return rng.multinomial(np.asarray(totals, dtype=np.int64), shares).astype(float)


def lognormal(totals, base, rng, *, sd: float = 0.5):
    n, p = len(totals), base.size
    s = base[None, :] * np.exp(sd * rng.standard_normal((n, p)))
    return _multinomial(totals, s, rng)


def dirichlet(totals, base, rng, *, icc: float = 0.05):
    n = len(totals)
    conc = (1 - icc) / icc
    g = rng.gamma(np.broadcast_to(np.maximum(base * conc, 1e-8), (n, base.size)))
    return _multinomial(totals, g, rng)


def gamma_poisson(totals, base, rng, *, k: float = 2.0):
    mu = np.asarray(totals, dtype=float)[:, None] * base[None, :]
    lam = rng.gamma(k, mu / k)
    out = rng.poisson(lam).astype(float)
    empty = out.sum(axis=1) == 0
    out[empty, 0] = 1.0                       # never an empty sample
    return out


def mixture(totals, base, rng, *, sd: float = 0.3):
    n, p = len(totals), base.size
    other = base[rng.permutation(p)]
    state = rng.random(n) < 0.5
    b = np.where(state[:, None], base[None, :], other[None, :])
    s = b * np.exp(sd * rng.standard_normal((n, p)))
    return _multinomial(totals, s, rng)


GENERATORS = {"lognormal": lognormal, "dirichlet": dirichlet,
              "gamma_poisson": gamma_poisson, "mixture": mixture}


def counts_from(generator: str, totals, base, rng, **kw) -> np.ndarray:
    """Counts for the given totals from one named generator (see the module notes)."""
    return GENERATORS[generator](totals, base, rng, **kw)
