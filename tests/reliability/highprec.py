"""Every registered measure written out again in 60-digit decimal arithmetic (a reference).

Straight from the formulas in tallyform.MEASURES (Legendre & Legendre 2012, ch. 7, and the
references listed there), one pair at a time, with Python's ``decimal`` module: no float64
anywhere after the input values, which are exact binary numbers and are converted exactly.
Slow by design; used on small tables or on a few pairs of a large one.
"""
from __future__ import annotations

from decimal import Decimal, getcontext, localcontext

import numpy as np

PREC = 60


def _dec(row) -> list[Decimal]:
    return [Decimal(float(v)) for v in row]          # exact: every float is a binary fraction


class Table:
    """Column-wide facts some measures need (chi-square masses, Gower ranges)."""

    def __init__(self, x: np.ndarray):
        self.x = np.asarray(x, dtype=np.float64)
        with localcontext() as ctx:
            ctx.prec = PREC
            rows = [_dec(r) for r in self.x]
            cols = list(zip(*rows))
            grand = sum(sum(r) for r in rows)
            self.masses = [sum(c) / grand for c in cols]
            self.ranges = [max(c) - min(c) for c in cols]

        self._rows: dict = {}
        self.memo: dict = {}           # per-row quantities (clr), keyed by (name, row)

    def row(self, i: int) -> list:
        if i not in self._rows:
            self._rows[i] = _dec(self.x[i])
        return self._rows[i]

    def pair(self, measure: str, i: int, j: int) -> Decimal:
        with localcontext() as ctx:
            ctx.prec = PREC
            self._ij = (i, j)
            return _MEASURES[measure](self.row(i), self.row(j), self)


def _sqrt(v: Decimal) -> Decimal:
    return v.sqrt() if v > 0 else Decimal(0)


def _profile(x):
    r = sum(x)
    return [v / r for v in x]


def euclidean(x, y, tab):
    return _sqrt(sum((a - b) ** 2 for a, b in zip(x, y)))


def manhattan(x, y, tab):
    return sum(abs(a - b) for a, b in zip(x, y))


def bray_curtis(x, y, tab):
    return sum(abs(a - b) for a, b in zip(x, y)) / (sum(x) + sum(y))


def chi_square(x, y, tab):
    a, b = _profile(x), _profile(y)
    return _sqrt(sum((p - q) ** 2 / c for p, q, c in zip(a, b, tab.masses)))


def hellinger(x, y, tab):
    a, b = _profile(x), _profile(y)
    return _sqrt(sum((_sqrt(p) - _sqrt(q)) ** 2 for p, q in zip(a, b)))


def chord(x, y, tab):
    nx, ny = _sqrt(sum(v * v for v in x)), _sqrt(sum(v * v for v in y))
    return _sqrt(sum((a / nx - b / ny) ** 2 for a, b in zip(x, y)))


def _clr(x):
    """Multiplicative replacement (delta = 1 / p^2 of the total), then centred log-ratio."""
    p = len(x)
    delta = Decimal(1) / Decimal(p) ** 2
    prof = _profile(x)
    nz = sum(1 for v in prof if v == 0)
    z = [delta if v == 0 else v * (1 - nz * delta) for v in prof]
    cache: dict = {}
    logs = [cache[v] if v in cache else cache.setdefault(v, v.ln()) for v in z]
    centre = sum(logs) / p
    return [v - centre for v in logs]


def aitchison(x, y, tab):
    i, j = tab._ij
    cx = tab.memo.setdefault(("clr", i), _clr(x) if ("clr", i) not in tab.memo else None)
    cy = tab.memo.setdefault(("clr", j), _clr(y) if ("clr", j) not in tab.memo else None)
    return _sqrt(sum((a - b) ** 2 for a, b in zip(cx, cy)))


def jaccard(x, y, tab):
    a = sum(1 for p, q in zip(x, y) if p > 0 and q > 0)
    bc = sum(1 for p, q in zip(x, y) if (p > 0) != (q > 0))
    return Decimal(bc) / Decimal(a + bc)


def quantitative_jaccard(x, y, tab):
    return 1 - sum(min(a, b) for a, b in zip(x, y)) / sum(max(a, b) for a, b in zip(x, y))


def sorensen(x, y, tab):
    a = sum(1 for p, q in zip(x, y) if p > 0 and q > 0)
    bc = sum(1 for p, q in zip(x, y) if (p > 0) != (q > 0))
    return Decimal(bc) / Decimal(2 * a + bc)


def kulczynski(x, y, tab):
    m = sum(min(a, b) for a, b in zip(x, y))
    return 1 - (m / sum(x) + m / sum(y)) / 2


def canberra(x, y, tab):
    return sum(abs(a - b) / (abs(a) + abs(b)) for a, b in zip(x, y) if a != 0 or b != 0)


def morisita_horn(x, y, tab):
    rx, ry = sum(x), sum(y)
    lx = sum(v * v for v in x) / rx ** 2
    ly = sum(v * v for v in y) / ry ** 2
    return 1 - 2 * sum(a * b for a, b in zip(x, y)) / ((lx + ly) * rx * ry)


def jensen_shannon(x, y, tab):
    a, b = _profile(x), _profile(y)
    s = Decimal(0)
    for p, q in zip(a, b):
        m = (p + q) / 2
        if p > 0:
            s += p * (p / m).ln()
        if q > 0:
            s += q * (q / m).ln()
    return _sqrt(s / 2)


def gower(x, y, tab):
    keep = [k for k, r in enumerate(tab.ranges) if r > 0]
    return sum(abs(x[k] - y[k]) / tab.ranges[k] for k in keep) / len(keep)


_MEASURES = {f.__name__: f for f in (
    euclidean, manhattan, bray_curtis, chi_square, hellinger, chord, aitchison, jaccard,
    quantitative_jaccard, sorensen, kulczynski, canberra, morisita_horn, jensen_shannon,
    gower)}
NAMES = tuple(_MEASURES)


# ---------------------------------------------------------------------- log-gamma, NB2
def _bernoulli(m: int) -> list:
    """B_0..B_m as fractions (B_1 = -1/2), from sum_k C(n+1, k) B_k = 0."""
    from fractions import Fraction
    from math import comb
    b = [Fraction(1)]
    for n in range(1, m + 1):
        b.append(-sum(comb(n + 1, k) * b[k] for k in range(n)) / Fraction(n + 1))
    return b


_B = _bernoulli(40)


def _pi() -> Decimal:
    """pi by Machin's formula, pi = 16 atan(1/5) - 4 atan(1/239)."""
    def atan_inv(x: int) -> Decimal:
        total, term, k, x2 = Decimal(0), Decimal(1) / x, 0, x * x
        tiny = Decimal(10) ** -(getcontext().prec + 5)
        while term > tiny:
            total += term / (2 * k + 1) * (-1 if k % 2 else 1)
            term /= x2
            k += 1
        return total
    return 16 * atan_inv(5) - 4 * atan_inv(239)


with localcontext() as _ctx:
    _ctx.prec = PREC + 10
    _HALF_LOG_2PI = (2 * _pi()).ln() / 2


def lgamma(z: Decimal) -> Decimal:
    """log Gamma(z) for z > 0: recurrence up to z >= 40, then Stirling's series with the
    Bernoulli numbers B_2..B_40 (error far below 1e-50 there)."""
    with localcontext() as ctx:
        ctx.prec = PREC + 10
        z = Decimal(z)
        shift = Decimal(0)
        while z < 40:
            shift += z.ln()
            z += 1
        s = (z - Decimal("0.5")) * z.ln() - z + _HALF_LOG_2PI
        for k in range(1, 21):
            b = _B[2 * k]
            s += Decimal(b.numerator) / Decimal(b.denominator) / (
                Decimal(2 * k * (2 * k - 1)) * z ** (2 * k - 1))
        return +(s - shift)


def nb2_loglik(y, mu, theta) -> Decimal:
    """The NB2 log-likelihood in its textbook log-gamma form, in 60-digit arithmetic."""
    with localcontext() as ctx:
        ctx.prec = PREC
        th = Decimal(float(theta))
        total = Decimal(0)
        for yi, mi in zip(y, mu):
            yi, mi = Decimal(float(yi)), Decimal(float(mi))
            total += (lgamma(yi + th) - lgamma(th) - lgamma(yi + 1)
                      + th * (th / (th + mi)).ln())
            if yi > 0:
                total += yi * (mi / (th + mi)).ln()
        return total
