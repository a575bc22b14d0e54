"""Words shared by the report, the methods paragraph and the command line: sampling units,
strata, the tests actually used (read from the result objects, never assumed), ellipses.

Pure functions of result objects; no statistics here.
"""
from __future__ import annotations

import re

__all__ = ["plural", "units_headline", "strata_sentence", "units_paragraph", "size_test_words",
           "test_label", "ellipse_words", "measure_phrase", "totals_heading"]

_IRREGULAR = {"person": "people", "mouse": "mice", "child": "children", "quadrat": "quadrats"}


def plural(word: str, n: int) -> str:
    """``"15 tanks"``, ``"1 site"``; a column name that is not a plain word stays quoted
    (``"15 units of 'Site_ID'"``)."""
    if not re.fullmatch(r"[a-z]+", word):
        return f"{n} unit{'s' if n != 1 else ''} of {word!r}"
    if n == 1:
        return f"1 {word}"
    if word in _IRREGULAR:
        return f"{n} {_IRREGULAR[word]}"
    if word.endswith(("s", "x", "z", "ch", "sh")):
        return f"{n} {word}es"
    if word.endswith("y") and word[-2:-1] not in "aeiou":
        return f"{n} {word[:-1]}ies"
    return f"{n} {word}s"


def _noun(word: str) -> str:
    """The plural noun alone (``"tanks"``), or ``"units of 'Site_ID'"``."""
    return plural(word, 2).split(" ", 1)[1]


def _level_phrase(lv) -> str:
    """``"15 tanks, each sampled 4 times"`` or ``"..., sampled 2-4 times (unbalanced)"``."""
    s = lv.sizes
    times = (f"each sampled {s.min()} time{'s' if s.min() != 1 else ''}" if lv.balanced
             else f"sampled {s.min()}-{s.max()} times (unbalanced)")
    return f"{plural(lv.name, lv.m)}, {times}"


def units_headline(n_samples: int, plan) -> str:
    """``"60 samples from 15 tanks (4 samples each)"``, or ``"60 samples"`` without units.
    Nested levels: ``"48 samples from 16 plots in 4 sites"``."""
    if plan is None or plan.independent:
        return f"{n_samples} samples"
    levels = list(plan.levels)
    finest = levels[-1]
    s = finest.sizes
    each = (f"{s.min()} sample{'s' if s.min() != 1 else ''} each" if finest.balanced
            else f"{s.min()}-{s.max()} samples each")
    text = f"{n_samples} samples from {plural(finest.name, finest.m)}"
    for lv in reversed(levels[:-1]):
        text += f" in {plural(lv.name, lv.m)}"
    return text + f" ({each})"


def strata_sentence(plan, terms) -> str:
    """``"'treatment' tested between tanks, 'week' within tanks"``."""
    if plan is None or plan.independent:
        return ""
    out = []
    for t in terms:
        lv = plan.level_of(t)
        if lv is None:
            out.append(f"{t!r} within {_noun(plan.levels[-1].name)}")
        else:
            out.append(f"{t!r} between {_noun(lv.name)}")
    return ", ".join(out)


def units_paragraph(units, *, cli: bool = False) -> str:
    """The sampling units of a run in plain words (report, command line).

    ``units`` is :class:`tallyform.core.steps.SpecUnits`; ``cli`` names the command-line
    options instead of the Python keywords.
    """
    plan = units.plan if units is not None else None
    opt_false = "--no-units" if cli else "units=False"
    opt_given = "--units COLUMN" if cli else "units='column'"
    if plan is None or plan.independent:
        if units is not None and units.requested is False:
            notes = " ".join(plan.notes) if plan is not None else ""
            return notes or f"Every sample was treated as an independent replicate ({opt_false})."
        if plan is not None and plan.notes:          # e.g. every sample its own unit
            return " ".join(plan.notes)
        return ("Every sample was treated as an independent replicate: no column of the "
                "sample information holds repeated samples of the units a tested factor was "
                f"applied to. If samples share a tank, site or plot, name it ({opt_given}).")
    text = "; ".join(_level_phrase(lv) for lv in plan.levels)
    text = text[:1].upper() + text[1:] + "."
    strata = strata_sentence(plan, units.terms)
    if strata:
        text += f" Tested: {strata}."
    if plan.detected:
        text += (f" The units were found from the design (the column within which a tested "
                 f"factor is constant); {opt_false} treats samples as independent.")
    text += (" Tests count units, not samples (Hurlbert 1984): whole units are permuted for "
             "a factor applied to units, samples within units for one that varies within "
             "them.")
    return text


def size_test_words(size) -> str:
    """What the size test did, from its result: method, reference, units."""
    ref = size.reference or ""
    method = size.method
    if method == "welch" and "Hotelling" in ref:
        what = ("Hotelling's T² on within-block differences of " + size.measure
                + " (every block holds one replicate of each group; Hotelling 1931)")
    elif method == "welch" and "Welch-James" in ref:
        what = (f"Welch's ANOVA of {size.measure} in the Welch-James form for blocks "
                "(Welch 1951; Johansen 1980)")
    elif method == "welch":
        what = f"Welch's ANOVA of {size.measure} (Welch 1951)"
    elif method == "anova":
        what = f"one-way ANOVA of {size.measure}"
    elif method == "kruskal":
        what = f"the Kruskal-Wallis test of {size.measure} (Kruskal & Wallis 1952)"
    elif method == "permutation":
        what = f"a permutation F test of {size.measure} ({ref})"
    elif method == "mixed":
        what = (f"a linear mixed model of {size.measure} with a random intercept per unit "
                "(REML)")
    elif method == "negbin":
        boot = "bootstrap" in ref
        what = ("negative-binomial regression of the totals with a dispersion per group (NB2; "
                "fit checked by quantile residuals, Dunn & Smyth 1996), p-value from "
                + (f"a parametric bootstrap of the likelihood ratio ({size.n_boot} draws from "
                   "the fitted null model; Davison & Hinkley 1997)" if boot else ref))
    else:
        what = f"{method} test of {size.measure}"
    if size.units:
        what += f", on unit totals ({size.units})"
    return what


def test_label(comparison, aspect: str) -> str:
    """The test a comparison used for one aspect, as the result names it ("PERMANOVA on
    chi_square"), so headings follow whatever test the core ran."""
    frame = comparison.to_frame()
    if aspect not in frame.index:
        return aspect
    text = str(frame.loc[aspect, "test"])
    return text.split(": ", 1)[1] if ": " in text else text


def ellipse_words(kind: str, level: float) -> str:
    """What an ellipse of this kind covers (the core's own words), with its source."""
    from ..core.ellipses import describe
    cite = {"confidence": "Hotelling 1931", "prediction": "Hotelling 1931",
            "bootstrap": "Efron & Tibshirani 1993", "data": ""}[kind]
    words = describe(kind, level)
    return words + (f" ({cite})" if cite else "")


_DISTANCES = {"euclidean", "chi_square", "hellinger", "chord", "aitchison", "jensen_shannon",
              "manhattan", "canberra"}
_LOWER = {"chi_square": "chi-square", "chord": "chord",
          "quantitative_jaccard": "quantitative Jaccard (Ruzicka)"}


def measure_phrase(name: str, *, plural_form: bool = True) -> str:
    """``"Bray-Curtis dissimilarities"``, ``"chi-square distances"`` (never "Chi-square
    distance distances")."""
    from ..core.measures import MEASURES
    rec = MEASURES.get(name)
    label = _LOWER.get(name) or (getattr(rec, "label", name) if rec is not None else name)
    label = re.sub(r" distance$", "", label)
    noun = "distance" if name in _DISTANCES else "dissimilarity"
    if plural_form:
        noun = "distances" if noun == "distance" else "dissimilarities"
    return f"{label} {noun}"


def totals_heading(table, group: str) -> str:
    """Heading of the totals-by-group table: what the totals are (never "size" for
    sequencing depths)."""
    abundance = getattr(table, "abundance", "absolute")
    if abundance == "absolute":
        return f"Sample totals (size: total abundance) by {group}"
    if table.load is None:
        return (f"Sequencing depths by {group} (reads per sample: technical, not the size "
                "of the community)")
    what = (f"loads from the spike-in {table.spike_in['taxon']!r}" if table.spike_in
            else f"loads ({table.load_name})")
    return f"Sample sizes by {group}: absolute {what}"
