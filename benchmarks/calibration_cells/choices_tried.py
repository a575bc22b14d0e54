"""The dashboard's choices tried (Tests panel) under a clean null of composition: a user tries
the panel's four shape measures in turn, each time reading the p-value adjusted for the
choices tried so far (tly.choice_adjusted with the same seed, as the panel runs it), and stops
at the first adjusted p at or below 0.05 (or after all four). All data are synthetic.

Level cells: the p-value then quoted is the one adjusted for every measure the panel offers
(the panel shows it beside the other). Reference rows on the same data sets: the p-value
adjusted only for the choices tried so far, which this search makes too small
(sequential testing: each further choice is another chance).

Designs and generators as in :mod:`choice_adjusted` (independent samples, groups of 8 and
12; repeated visits, 4 and 6 tanks x 3 visits, tested with ``units='tank'``), 40 taxa.
"""
from __future__ import annotations

from tallyform.core.choice_adjusted import choice_adjusted

from .base import Cell
from .choice_adjusted import P_TAXA, PERMS, independent, visits

MENU = ("chi_square", "hellinger", "aitchison", "chord")    # the Tests panel's measures
_MEMO: dict = {}


def _session(rng, design, generator, sd) -> dict:
    key = (design, generator, sd, str(rng.bit_generator.state))
    if key in _MEMO:
        return _MEMO[key]
    make = independent if design == "independent" else visits
    tab = make(rng, generator=generator, sd=sd)
    units = False if design == "independent" else "tank"
    seed = int(rng.integers(2**31))         # the panel's seed, the same for every call
    tried = []
    for m in MENU:
        tried.append({"measure": m})
        r = choice_adjusted(tab, "g", tried, n_permutations=PERMS, rng=seed, units=units,
                            progress=False)
        adj = float(r.pvalue_adjusted[m])
        if adj <= 0.05:
            break
    every = choice_adjusted(tab, "g", [{"measure": x} for x in MENU], n_permutations=PERMS,
                            rng=seed, units=units, progress=False)
    if len(_MEMO) > 4000:
        _MEMO.clear()
    _MEMO[key] = {"tried": adj, "menu": float(every.pvalue_adjusted[m])}
    return _MEMO[key]


def replicate(design, generator, *, what="menu", sd=0.3):
    def run(rng):
        return _session(rng, design, generator, sd)[what]
    return run


_CASES = [("independent", "lognormal", 0.3, "groups of 8 and 12 samples, totals log-normal "
           "around 3000 (sd 0.3)"),
          ("independent", "dirichlet", 0.8, "groups of 8 and 12 samples, totals spread "
           "10-fold (sd 0.8)"),
          ("visits", "gamma_poisson", 0.3, "4 and 6 tanks x 3 visits, tank effects "
           "(units='tank'), totals sd 0.3")]

CELLS = []
for _design, _gen, _sd, _words in _CASES:
    _id = f"tried/{_design}-{_gen}"
    _where = f"{_words}, {P_TAXA} taxa, {_gen} biology; the 4 Tests-panel measures tried in turn"
    CELLS.append(Cell(_id, "choices tried",
                      "Tests panel: search until adjusted p <= 0.05, quoted p adjusted for "
                      "all 4 measures offered", _where, replicate(_design, _gen, sd=_sd),
                      band=(0.02, 0.07), reps=1000, short_reps=30))
    CELLS.append(Cell(_id + "-sofar", "choices tried",
                      "the same search, p adjusted only for the choices tried so far",
                      _where, replicate(_design, _gen, what="tried", sd=_sd), reps=1000,
                      check=False, seed=CELLS[-1].seed))
