"""Size and shape partition: the Monte Carlo test of the shape-only share under its null,
and the coverage of the 95 % intervals of every share and of paired differences (all data
synthetic).

Level cells: tables drawn around ONE composition (the test's null) with several patterns of
totals, measures, transforms and sizes; reference rows show the permutation tests that the
Monte Carlo test replaced, and its power on composition gradients.

Coverage cells: two populations of samples ("gradient": taxa with Gaussian responses along a
latent gradient, totals log-normal and partly tied to it, log-normal between-sample noise;
"states": three community states with state-dependent totals and Dirichlet-multinomial
noise). The true share is the partition of 3000 samples x 2 independent draws of the same
population with the number of shape dimensions fixed (its Monte Carlo SD is below 0.005);
each data set is partitioned with that number given. Reference rows: the default number of
dimensions (chosen from the data; truth at the number chosen) and n = 10.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np
import pandas as pd

from tallyform.core.partition import FRACTIONS, size_shape
from tallyform.core.partition_engine import arrays_from_counts
from tallyform.core.partition_resample import jackknife_interval, leave_out_sets
from tallyform.core.table import CommunityTable
from tallyform.core.transforms import Power

from .base import Cell
from .generators import base_profile

SIMS = 99          # simulated tables per Monte Carlo test inside the calibration loop
BOOT = 200         # leave-out replicates per interval
N_BIG = 3000


def _table(x) -> CommunityTable:
    x = x[:, x.sum(axis=0) > 0]
    n, p = x.shape
    return CommunityTable(pd.DataFrame(x, index=[f"s{i:03d}" for i in range(n)],
                                       columns=[f"t{j:03d}" for j in range(p)]))


# ---------------------------------------------------------------------------- totals patterns
def _totals(pattern: str, n: int, rng) -> np.ndarray:
    if pattern == "uniform":                    # 200-2000
        return rng.integers(200, 2001, n)
    if pattern == "lognormal":                  # median 300, 10-fold spread
        return np.maximum(20, np.rint(300 * np.exp(rng.standard_normal(n)))).astype(int)
    if pattern == "two_groups":                 # a third at ~100, the rest at ~1000
        k = n // 3
        mean = np.r_[np.full(k, 100.0), np.full(n - k, 1000.0)]
        return np.maximum(10, np.rint(mean * np.exp(0.3 * rng.standard_normal(n)))).astype(int)
    raise ValueError(pattern)


def _null_pvalue(rng, *, n=24, p=30, pattern="uniform", measure="bray_curtis",
                 transform=None, rho=None, shape_dims=None, give_rho=True):
    base = base_profile(p, rng)
    totals = _totals(pattern, n, rng)
    if rho:
        conc = (1 - rho) / rho
        g = rng.gamma(np.broadcast_to(base * conc, (n, p)))
        x = rng.multinomial(totals, g / g.sum(axis=1, keepdims=True)).astype(float)
    else:
        x = rng.multinomial(totals, base).astype(float)
    r = size_shape(_table(x), measure, transform=transform, shape_dims=shape_dims,
                   n_permutations=SIMS, overdispersion=rho if give_rho else None, rng=rng)
    return r.pvalue


def _fixed_axes_pvalue(rng, *, fraction="shape_only", pattern="uniform", measure="bray_curtis",
                       n=24, p=30):
    """The permutation test the Monte Carlo test replaced: residual permutation holding the
    shape coordinates fixed (reference rows)."""
    from tallyform.core.dissimilarity import dissimilarity
    from tallyform.core.partition import _cached_shape, default_dims, size_predictor
    from tallyform.core.permutation import permutation_f_test
    base = base_profile(p, rng)
    totals = (np.exp(rng.uniform(np.log(50), np.log(5000), n)).astype(int)
              if pattern == "wide" else _totals(pattern, n, rng))
    tab = _table(rng.multinomial(totals, base).astype(float))
    d = dissimilarity(tab, measure)
    u, ev, _, _ = _cached_shape(tab, "chi_square", measure, None)
    k, _ = default_dims(ev, n)
    z, _ = size_predictor(tab)
    one = np.ones((n, 1))
    full = np.hstack([one, z[:, None], u[:, :k]])
    keep = u[:, :k] if fraction == "size_only" else z[:, None]
    reduced = np.hstack([one, keep])
    return permutation_f_test(d, full, reduced, n_permutations=199, rng=rng).pvalue


# ---------------------------------------------------------------------------- populations
def gradient(n, rng, p=30):
    """Gaussian responses along one latent gradient; totals log-normal (sd 0.6) and partly
    tied to the gradient; log-normal between-sample noise (sd 0.3); multinomial counts."""
    taxa = np.random.default_rng(12345)            # the population's fixed taxa
    opt, base = taxa.uniform(-1.5, 1.5, p), taxa.lognormal(0, 1.0, p)
    g = rng.uniform(-1, 1, n)
    mu = base[None, :] * np.exp(-(g[:, None] - opt[None, :]) ** 2 / (2 * 0.8 ** 2))
    mu = mu * np.exp(0.3 * rng.standard_normal((n, p)))
    tot = np.maximum(5, np.rint(400 * np.exp(0.6 * rng.standard_normal(n) + 0.4 * g)))
    return rng.multinomial(tot.astype(np.int64), mu / mu.sum(1, keepdims=True)).astype(float)


def states(n, rng, p=30):
    """Three community states (fixed profiles) in equal proportions, state-dependent mean
    totals (x1, x2, x0.7 of 300; log-normal sd 0.5), Dirichlet-multinomial (icc 0.03)."""
    taxa = np.random.default_rng(999)
    profs = taxa.dirichlet(np.full(p, 0.7), 3)
    st = rng.integers(0, 3, n)
    mt = 300 * np.array([1.0, 2.0, 0.7])[st] * np.exp(0.5 * rng.standard_normal(n))
    conc = 0.97 / 0.03
    gm = rng.gamma(profs[st] * conc)
    return rng.multinomial(np.maximum(5, np.rint(mt)).astype(np.int64),
                           gm / gm.sum(1, keepdims=True)).astype(float)


POPULATIONS = {"gradient": gradient, "states": states}
CHOICES = {"bc": ("bray_curtis", None), "bc4": ("bray_curtis", 0.25),
           "hel": ("hellinger", None), "euc": ("euclidean", None)}


def _arrays(x, choice):
    measure, a = CHOICES[choice]
    x = x[:, x.sum(axis=0) > 0]
    return arrays_from_counts(x, measure=measure, transform=None if a is None else Power(a),
                              shape="chi_square", z=np.log(x.sum(axis=1)))


@lru_cache(maxsize=None)
def true_shares(pop: str, choice: str, k: int) -> np.ndarray:
    """The population's shares with k shape dimensions: mean over two draws of 3000."""
    vals = [_arrays(POPULATIONS[pop](N_BIG, np.random.default_rng([424242, s])), choice)
            .shares(shape_dims=k)[0] for s in range(2)]
    return np.mean(vals, axis=0)


_STATES: dict = {}


@lru_cache(maxsize=4096)
def _study(pop, n, choices, k, key):
    """One simulated study: estimates, intervals and truths for each choice and for the
    difference of the last two (memoised: the four share cells reuse one study)."""
    rng = np.random.default_rng()
    rng.bit_generator.state = _STATES[key]                  # the cell's own stream
    x = POPULATIONS[pop](n, rng)
    kept, d, items = leave_out_sets(n, BOOT, rng)
    out, reps, ests, truths = {}, {}, {}, {}
    for ch in choices:
        arr = _arrays(x, ch)
        est, kk = arr.shares(shape_dims=k)
        rep = np.array([arr.shares(idx, shape_dims=kk)[0] for idx in kept])
        low, high, _ = jackknife_interval(est, rep, items=items, d=d)
        ests[ch], reps[ch], truths[ch] = est, rep, true_shares(pop, ch, kk)
        out[ch] = (low, high, truths[ch])
    if len(choices) == 2:
        a, b = choices
        low, high, _ = jackknife_interval(ests[b] - ests[a], reps[b] - reps[a],
                                          items=items, d=d)
        out["diff"] = (low, high, truths[b] - truths[a])
    return out


def _covers(rng, *, pop, n, choices, k, which, share):
    key = repr(rng.bit_generator.state)
    _STATES.setdefault(key, rng.bit_generator.state)
    low, high, truth = _study(pop, n, tuple(choices), k, key)[which]
    j = FRACTIONS.index(share)
    if not (np.isfinite(low[j]) and np.isfinite(high[j])):
        return None
    return bool(low[j] <= truth[j] <= high[j])


# ---------------------------------------------------------------------------- the cells
def _level_cells():
    cells = []
    spec = [
        ("bc-uniform", dict(), "24 samples x 30 taxa, one profile, totals 200-2000, "
                               "Bray-Curtis"),
        ("bc-lognormal-small", dict(n=12, pattern="lognormal"),
         "12 samples, one profile, log-normal totals (10-fold), Bray-Curtis"),
        ("bc4-two-groups", dict(n=30, pattern="two_groups", transform=Power(0.25)),
         "30 samples, totals ~100 (10) vs ~1000 (20), fourth root + Bray-Curtis"),
        ("hellinger-lognormal", dict(n=20, pattern="lognormal", measure="hellinger"),
         "20 samples, log-normal totals, Hellinger"),
        ("euclidean-uniform-fixed-k", dict(measure="euclidean", shape_dims=2),
         "24 samples, totals 200-2000, Euclidean, shape_dims=2 given"),
        ("bc-dirichlet-rho", dict(rho=0.05, pattern="uniform"),
         "24 samples, Dirichlet-multinomial rho 0.05 given as overdispersion, Bray-Curtis"),
    ]
    for name, kw, design in spec:
        cells.append(Cell(f"partition/shape-test-{name}", "partition",
                          "size_shape(n_permutations=99) shape-only Monte Carlo test",
                          design, lambda rng, kw=kw: _null_pvalue(rng, **kw),
                          reps=600, short_reps=15))
    cells += [
        Cell("partition/shape-test-dirichlet-rho-not-given", "partition",
             "shape-only test without the overdispersion (null is multinomial only)",
             "24 samples, Dirichlet-multinomial rho 0.05, not given: composition varies",
             lambda rng: _null_pvalue(rng, rho=0.05, give_rho=False), check=False, reps=400,
             short_reps=10),
        Cell("partition/shape-permutation-fixed-axes", "partition",
             "residual permutation holding the shape axes fixed (replaced)",
             "24 samples x 30 taxa, one profile, totals 200-2000, Bray-Curtis",
             lambda rng: _fixed_axes_pvalue(rng), check=False, reps=400, short_reps=10),
        Cell("partition/size-permutation-fixed-axes", "partition",
             "size-only residual permutation (removed)",
             "24 samples, one profile, totals 50-5000, chi-square (no true size effect)",
             lambda rng: _fixed_axes_pvalue(rng, fraction="size_only", pattern="wide",
                                            measure="chi_square"),
             check=False, reps=400, short_reps=10),
        Cell("partition/shape-test-power-clear-gradient", "partition",
             "power of the shape-only test (rejection rate)",
             "'gradient' population, 20 samples, Bray-Curtis",
             lambda rng: size_shape(_table(gradient(20, rng)), "bray_curtis",
                                    n_permutations=SIMS, rng=rng).pvalue,
             check=False, reps=400, short_reps=10),
        Cell("partition/shape-test-power-weak-gradient", "partition",
             "power of the shape-only test (rejection rate)",
             "the gradient at 0.4 of its length, 20 samples, Bray-Curtis",
             lambda rng: _weak_gradient_pvalue(rng), check=False, reps=400, short_reps=10),
    ]
    return cells


def _weak_gradient_pvalue(rng, n=20, p=30):
    taxa = np.random.default_rng(12345)
    opt, base = taxa.uniform(-1.5, 1.5, p), taxa.lognormal(0, 1.0, p)
    g = rng.uniform(-1, 1, n) * 0.4
    mu = base[None, :] * np.exp(-(g[:, None] - opt[None, :]) ** 2 / (2 * 0.8 ** 2))
    tot = np.maximum(5, np.rint(400 * np.exp(0.6 * rng.standard_normal(n))))
    x = rng.multinomial(tot.astype(np.int64), mu / mu.sum(1, keepdims=True)).astype(float)
    return size_shape(_table(x), "bray_curtis", n_permutations=SIMS, rng=rng).pvalue


#: Shares of a size-free measure whose intervals the result calls conservative.
_CONSERVATIVE_SHARES = ("size_only", "residual")


def _coverage_cells():
    cells = []
    band = (0.90, 0.98)
    configs = [   # (pop, n, choices, k, which, shares, checked, label)
        ("gradient", 20, ("bc", "bc4"), 2, "bc", FRACTIONS, True, "Bray-Curtis"),
        ("gradient", 20, ("bc", "bc4"), 2, "bc4", FRACTIONS, True,
         "fourth root + Bray-Curtis"),
        ("gradient", 20, ("bc", "bc4"), 2, "diff", FRACTIONS, True,
         "paired difference fourth root + BC minus BC"),
        ("gradient", 40, ("bc", "bc4"), 3, "bc", FRACTIONS, True, "Bray-Curtis"),
        ("gradient", 40, ("bc", "bc4"), 3, "diff", ("size_only", "shape_only"), True,
         "paired difference fourth root + BC minus BC"),
        ("states", 20, ("hel", "bc"), 2, "hel", FRACTIONS, True, "Hellinger"),
        ("states", 40, ("bc", "bc4"), 2, "bc4", FRACTIONS, True,
         "fourth root + Bray-Curtis"),
        ("states", 40, ("bc", "bc4"), 2, "diff", FRACTIONS, True,
         "paired difference fourth root + BC minus BC"),
        ("gradient", 10, ("bc", "bc4"), 1, "bc", FRACTIONS, False, "Bray-Curtis, n = 10"),
        ("gradient", 10, ("bc", "bc4"), 1, "diff", ("size_only",), False,
         "paired difference, n = 10"),
        ("states", 40, ("bc", "bc4"), None, "bc", FRACTIONS, False,
         "Bray-Curtis, default shape_dims (chosen from the data)"),
        ("gradient", 20, ("bc", "bc4"), None, "bc", FRACTIONS, False,
         "Bray-Curtis, default shape_dims (chosen from the data)"),
    ]
    for pop, n, choices, k, which, shares, checked, label in configs:
        kk = "default-k" if k is None else f"k{k}"
        for share in shares:
            cid = f"partition/ci-{pop}-n{n}-{kk}-{which}-{share}"
            design = (f"'{pop}' population, n = {n}, "
                      + ("shape_dims from the data" if k is None else f"shape_dims = {k}")
                      + f"; {label}")
            cell_band = band
            if which == "hel" and share in _CONSERVATIVE_SHARES:
                # a size-free measure: the size-only share is ~0, where the jackknife
                # overstates the spread (Efron & Stein 1981); the result says the interval
                # is conservative, so only under-coverage is a failure here
                cell_band = (band[0], 1.0)
                design += " (size-free: conservative, said in the result; band [0.90, 1])"
            cells.append(Cell(
                cid, "partition", f"fractions_ci ({share}), delete-d jackknife", design,
                lambda rng, pop=pop, n=n, choices=choices, k=k, which=which, share=share:
                _covers(rng, pop=pop, n=n, choices=choices, k=k, which=which, share=share),
                kind="coverage", band=cell_band, reps=200, short_reps=5, check=checked,
                seed=20261203 + n))
    return cells


CELLS = _level_cells() + _coverage_cells()
