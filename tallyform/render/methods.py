"""The methods paragraph: every choice of the spec in words, with the published references."""
from __future__ import annotations

__all__ = ["methods_text", "methods_references", "REFERENCES", "CALIBRATION_SENTENCE"]

REFERENCES = {
    "anderson2001": "Anderson MJ (2001) A new method for non-parametric multivariate analysis "
                    "of variance. Austral Ecology 26:32-46.",
    "anderson2006": "Anderson MJ (2006) Distance-based tests for homogeneity of multivariate "
                    "dispersions. Biometrics 62:245-253.",
    "benjamini1995": "Benjamini Y, Hochberg Y (1995) Controlling the false discovery rate. "
                     "Journal of the Royal Statistical Society B 57:289-300.",
    "borcard1992": "Borcard D, Legendre P, Drapeau P (1992) Partialling out the spatial "
                   "component of ecological variation. Ecology 73:1045-1055.",
    "cailliez1983": "Cailliez F (1983) The analytical solution of the additive constant "
                    "problem. Psychometrika 48:305-308.",
    "clopper1934": "Clopper CJ, Pearson ES (1934) The use of confidence or fiducial limits "
                   "illustrated in the case of the binomial. Biometrika 26:404-413.",
    "ezekiel1930": "Ezekiel M (1930) Methods of Correlation Analysis. Wiley, New York.",
    "freedman1983": "Freedman D, Lane D (1983) A nonstochastic interpretation of reported "
                    "significance levels. Journal of Business & Economic Statistics 1:292-298.",
    "gower1966": "Gower JC (1966) Some distance properties of latent root and vector methods "
                 "used in multivariate analysis. Biometrika 53:325-338.",
    "holm1979": "Holm S (1979) A simple sequentially rejective multiple test procedure. "
                "Scandinavian Journal of Statistics 6:65-70.",
    "kruskal1964": "Kruskal JB (1964) Nonmetric multidimensional scaling: a numerical method. "
                   "Psychometrika 29:115-129.",
    "legendre1999": "Legendre P, Anderson MJ (1999) Distance-based redundancy analysis. "
                    "Ecological Monographs 69:1-24.",
    "legendre2001": "Legendre P, Gallagher ED (2001) Ecologically meaningful transformations "
                    "for ordination of species data. Oecologia 129:271-280.",
    "legendre2012": "Legendre P, Legendre L (2012) Numerical Ecology, 3rd English edition. "
                    "Elsevier, Amsterdam.",
    "lingoes1971": "Lingoes JC (1971) Some boundary conditions for a monotone analysis of "
                   "symmetric matrices. Psychometrika 36:195-203.",
    "mcardle2001": "McArdle BH, Anderson MJ (2001) Fitting multivariate models to community "
                   "data: a comment on distance-based redundancy analysis. Ecology 82:290-297.",
    "mosimann1962": "Mosimann JE (1962) On the compound multinomial distribution, the "
                    "multivariate beta-distribution, and correlations among proportions. "
                    "Biometrika 49:65-82.",
    "okabe2008": "Okabe M, Ito K (2008) Color Universal Design (CUD): how to make figures and "
                 "presentations that are friendly to colorblind people.",
    "peresneto2006": "Peres-Neto PR, Legendre P, Dray S, Borcard D (2006) Variation "
                     "partitioning of species data matrices: estimation and comparison of "
                     "fractions. Ecology 87:2614-2625.",
    "welch1951": "Welch BL (1951) On the comparison of several mean values: an alternative "
                 "approach. Biometrika 38:330-336.",
    "kruskalwallis1952": "Kruskal WH, Wallis WA (1952) Use of ranks in one-criterion variance "
                         "analysis. Journal of the American Statistical Association "
                         "47:583-621.",
    "aitchison1986": "Aitchison J (1986) The Statistical Analysis of Compositional Data. "
                     "Chapman & Hall, London.",
    "hotelling1931": "Hotelling H (1931) The generalization of Student's ratio. Annals of "
                     "Mathematical Statistics 2:360-378.",
    "vandeputte2017": "Vandeputte D, Kathagen G, D'hoe K, et al. (2017) Quantitative "
                      "microbiome profiling links gut community variation to microbial load. "
                      "Nature 551:507-511.",
    "stammler2016": "Stammler F, Glasner J, Hiergeist A, et al. (2016) Adjusting microbiome "
                    "profiles for differences in microbial load by spike-in bacteria. "
                    "Microbiome 4:28.",
    "hurlbert1984": "Hurlbert SH (1984) Pseudoreplication and the design of ecological field "
                    "experiments. Ecological Monographs 54:187-211.",
    "nelder1965": "Nelder JA (1965) The analysis of randomized experiments with orthogonal "
                  "block structure. I and II. Proceedings of the Royal Society of London A "
                  "283:147-162, 163-178.",
    "snedecor1989": "Snedecor GW, Cochran WG (1989) Statistical Methods, 8th edition. Iowa "
                    "State University Press, Ames.",
    "anderson2003": "Anderson MJ, ter Braak CJF (2003) Permutation tests for multi-factorial "
                    "analysis of variance. Journal of Statistical Computation and Simulation "
                    "73:85-113.",
    "alekseyenko2016": "Alekseyenko AV (2016) Multivariate Welch t-test on distances. "
                       "Bioinformatics 32:3552-3558.",
    "hamidi2019": "Hamidi B, Wallace K, Vasu C, Alekseyenko AV (2019) W*d-test: robust "
                  "distance-based multivariate analysis of variance. Microbiome 7:51.",
    "johansen1980": "Johansen S (1980) The Welch-James approximation to the distribution of "
                    "the residual sum of squares in a weighted linear regression. Biometrika "
                    "67:85-92.",
    "dunn1996": "Dunn PK, Smyth GK (1996) Randomized quantile residuals. Journal of "
                "Computational and Graphical Statistics 5:236-244.",
    "davison1997": "Davison AC, Hinkley DV (1997) Bootstrap Methods and their Application. "
                   "Cambridge University Press, Cambridge.",
    "shao1989": "Shao J, Wu CFJ (1989) A general theory for jackknife variance estimation. "
                "Annals of Statistics 17:1176-1197.",
    "efron1993": "Efron B, Tibshirani RJ (1993) An Introduction to the Bootstrap. Chapman & "
                 "Hall, New York.",
    "westfall1993": "Westfall PH, Young SS (1993) Resampling-Based Multiple Testing: Examples "
                    "and Methods for p-Value Adjustment. Wiley, New York.",
}
# how each work is cited in the text: (authors as written, year)
_CITED_AS = {
    "anderson2001": ("Anderson", "2001"), "anderson2006": ("Anderson", "2006"),
    "anderson2003": ("Anderson & ter Braak", "2003"),
    "benjamini1995": ("Benjamini & Hochberg", "1995"), "borcard1992": ("Borcard et al.", "1992"),
    "cailliez1983": ("Cailliez", "1983"), "clopper1934": ("Clopper & Pearson", "1934"),
    "ezekiel1930": ("Ezekiel", "1930"), "freedman1983": ("Freedman & Lane", "1983"),
    "gower1966": ("Gower", "1966"), "holm1979": ("Holm", "1979"),
    "kruskal1964": ("Kruskal", "1964"), "legendre1999": ("Legendre & Anderson", "1999"),
    "legendre2001": ("Legendre & Gallagher", "2001"),
    "legendre2012": ("Legendre & Legendre", "2012"), "lingoes1971": ("Lingoes", "1971"),
    "mcardle2001": ("McArdle & Anderson", "2001"), "mosimann1962": ("Mosimann", "1962"),
    "okabe2008": ("Okabe & Ito", "2008"), "peresneto2006": ("Peres-Neto et al.", "2006"),
    "welch1951": ("Welch", "1951"), "kruskalwallis1952": ("Kruskal & Wallis", "1952"),
    "aitchison1986": ("Aitchison", "1986"), "hotelling1931": ("Hotelling", "1931"),
    "vandeputte2017": ("Vandeputte et al.", "2017"), "stammler2016": ("Stammler et al.", "2016"),
    "hurlbert1984": ("Hurlbert", "1984"), "nelder1965": ("Nelder", "1965"),
    "snedecor1989": ("Snedecor & Cochran", "1989"), "alekseyenko2016": ("Alekseyenko", "2016"),
    "hamidi2019": ("Hamidi et al.", "2019"), "johansen1980": ("Johansen", "1980"),
    "dunn1996": ("Dunn & Smyth", "1996"), "davison1997": ("Davison & Hinkley", "1997"),
    "shao1989": ("Shao & Wu", "1989"), "efron1993": ("Efron & Tibshirani", "1993"),
    "westfall1993": ("Westfall & Young", "1993"),
}


_TRANSFORM_WORDS = {
    "none": "used as counted (no transformation)",
    "sqrt": "square-root transformed",
    "fourth_root": "fourth-root transformed",
    "log1p": "transformed to log(1 + x)",
    "presence": "reduced to presence/absence",
    "profile": "converted to relative abundances (profiles)",
    "hellinger": "Hellinger-transformed (Legendre & Gallagher 2001)",
    "chord": "chord-transformed (rows scaled to unit length)",
    "wisconsin": "Wisconsin double-standardised",
    "clr": "centred-log-ratio transformed (Aitchison 1986)",
}
_SIZE_WORDS = {"log_total": "the log of each sample's total abundance",
               "total": "each sample's total abundance",
               "log_total_per_effort": "the log of each sample's total abundance per unit of "
                                       "sampling effort"}
_SHAPE_WORDS = {"chi_square": "chi-square distances among the samples' profiles",
                "hellinger": "Hellinger distances among the samples' profiles",
                "aitchison": "Aitchison distances (centred log-ratios) among the profiles",
                "same_measure": "the measure under study applied to rows rescaled to a common "
                                "total"}
_SIZE_METHOD_WORDS = {"anova": "one-way ANOVA", "welch": "Welch's ANOVA (Welch 1951)",
                      "kruskal": "the Kruskal-Wallis test (Kruskal & Wallis 1952)",
                      "permutation": "a permutation F test",
                      "negbin": "negative-binomial regression with a dispersion per group "
                                "(fit checked by quantile residuals, Dunn & Smyth 1996; "
                                "p-value from a parametric bootstrap of the likelihood "
                                "ratio, Davison & Hinkley 1997)"}
CALIBRATION_SENTENCE = ("Every test used here was checked by simulation; see the calibration "
                        "table (docs/calibration.md in the tallyform repository).")


def _transform_words(name: str) -> str:
    if name in _TRANSFORM_WORDS:
        return _TRANSFORM_WORDS[name]
    if name.startswith("power("):
        return f"raised to the power {name[6:-1]}"
    return f"transformed ({name})"


def _measure_label(name: str) -> str:
    """The measure's name for a sentence ("Bray-Curtis", "chi-square")."""
    from .wording import measure_phrase
    return measure_phrase(name).rsplit(" ", 1)[0]


def _abundance_words(spec) -> list[str]:
    """What the totals were taken to mean (``spec.abundance``, ``load``, ``spike_in``)."""
    if spec.abundance is None:
        return []
    if spec.abundance == "absolute":
        return ["Sample totals were taken as absolute abundances (sizes)."]
    text = ("Counts were treated as relative abundances (sequencing reads), whose totals are "
            "technical")
    if spec.load is not None:
        return [text + f"; each sample's absolute abundance was its measured load "
                       f"({spec.load}), and absolute abundances were profile x load "
                       "(Vandeputte et al. 2017)."]
    if spec.spike_in is not None:
        return [text + f"; each sample's absolute abundance was estimated from a spike-in "
                       f"({spec.spike_in['taxon']}) added in a known amount "
                       f"({spec.spike_in['added']}) as added x (reads - spike-in reads) / "
                       "spike-in reads (Stammler et al. 2016), the spike-in was removed from "
                       "the profiles, and absolute abundances were profile x load "
                       "(Vandeputte et al. 2017)."]
    return [text + ", so sizes were not compared; composition and spread were."]


def _data_sentence(spec, results, sw) -> str:
    from .wording import units_headline
    if results is not None:
        t = results.table
        plan = results.units.plan if results.units is not None else None
        head = (f"Abundances of {t.n_taxa} taxa in {units_headline(t.n_samples, plan)} were "
                f"analysed with tallyform {sw.get('tallyform', '?')}")
    else:
        head = f"Abundances were analysed with tallyform {sw.get('tallyform', '?')}"
    return head + (f" (Python {sw.get('python', '?')}, numpy {sw.get('numpy', '?')}, scipy "
                   f"{sw.get('scipy', '?')}, pandas {sw.get('pandas', '?')}, statsmodels "
                   f"{sw.get('statsmodels', '?')}).")


def _units_words(spec, results) -> list[str]:
    """Sampling units and error strata (from the run when there is one)."""
    from .wording import strata_sentence
    units = results.units if results is not None else None
    plan = units.plan if units is not None else None
    if plan is not None and not plan.independent:
        strata = strata_sentence(plan, units.terms)
        how = (", found from the design as the column within which a tested factor is "
               "constant" if plan.detected else "")
        levels = " within ".join(repr(lv.name) for lv in reversed(plan.levels))
        return [f"Samples that share a sampling unit ({levels}{how}) are not independent "
                "replicates (Hurlbert 1984), so every test counted units: each term was "
                "tested in its error stratum (Nelder 1965; Snedecor & Cochran 1989, ch. 16)"
                + (f", {strata}" if strata else "") + "; a term applied to whole units was "
                "tested by permuting whole units, one that varies within units by permuting "
                "samples within their unit."]
    if results is None and spec.units is None:
        return ["Sampling units (samples of one tank, site or plot) were looked for in the "
                "design, and every test counted units where they were found (Hurlbert 1984; "
                "error strata, Nelder 1965)."]
    if results is None and spec.units:
        cols = spec.unit_columns
        return [f"Samples that share a sampling unit ({' within '.join(map(repr, cols[::-1]))}"
                ") are not independent replicates (Hurlbert 1984), so every test counted "
                "units, each term in its error stratum (Nelder 1965; Snedecor & Cochran 1989, "
                "ch. 16)."]
    return ["Every sample was treated as an independent replicate."]


def _partition_words(spec, results, measure) -> list[str]:
    s = results.size_shape if results is not None else None
    k = s.shape_dims if s is not None else None
    dims = (f"the {spec.shape_dims} leading principal coordinates" if spec.shape_dims
            else (f"the {k} leading principal coordinates (the fewest holding 75 % of the "
                  "variation in composition, at most (n - 2) / 3)" if k else
                  "the fewest leading principal coordinates holding 75 % of the "
                  "variation in composition (at most (n - 2) / 3)"))
    out = [
        "To separate differences in total abundance (size) from differences in composition "
        "(shape), the variation of these dissimilarities was partitioned by distance-based "
        "redundancy analysis (db-RDA; Legendre & Anderson 1999; McArdle & Anderson 2001) "
        f"between a size predictor, {_SIZE_WORDS[spec.size]}, and shape predictors, {dims} "
        f"of {_SHAPE_WORDS[spec.shape]}, using adjusted R² (Ezekiel 1930) and the fractions "
        "of Borcard et al. (1992) and Peres-Neto et al. (2006)."]
    if spec.n_permutations:
        out.append(
            "The shape-only fraction was tested by a Monte Carlo test (Davison & Hinkley "
            f"1997, ch. 4): {spec.n_permutations} tables were simulated with one composition "
            "for all samples, each sample's counts drawn (multinomial) at its observed total, "
            "and each was "
            "partitioned anew (shape coordinates and their number re-derived), so that the "
            "observed fraction is compared with what counting noise alone gives; the "
            "size-only fraction was not tested.")
    if spec.n_boot:
        lv = _resampled_units(results, spec)
        out.append(
            f"95 % intervals of every fraction came from {spec.n_boot} delete-d jackknife "
            f"replicates (d = n/4 {lv} left out at a time; Shao & Wu 1989), bias-corrected, "
            "with t quantiles.")
    if spec.compare_with and (results is None or results.choices is not None):
        a = {"measure": spec.measure, "transform": spec.transform, "size": spec.size,
             "shape": spec.shape, "shape_dims": spec.shape_dims}
        b = dict(a, **{k: ("none" if k == "transform" and v is None else v)
                       for k, v in spec.compare_with.items()})
        out.append(f"The fractions of {_choice_words(a)} were compared with those of "
                   f"{_choice_words(b)} as paired differences"
                   + (" with intervals from the same leave-out replicates." if spec.n_boot
                      else "."))
    return out


_STEP_WORDS = {"size_shape": "the size and shape partition", "scan": "the scan",
               "choices": "the comparison of two choices",
               "partition intervals": "intervals of the partition's shares",
               "dissimilarity": "the dissimilarities", "ordination": "the ordination",
               "ellipses": "the ellipses", "comparison": "the size, shape and spread tests",
               "permanova": "the PERMANOVA of the chosen measure",
               "pairwise": "the pairwise contrasts", "contributions": "the taxon contributions",
               "audit": "the audit",
               "choice_adjusted": "the adjustment for the choices tried"}


def _scan_words(spec, results) -> str:
    same = "The same" if results is None or results.size_shape is not None else "The size " \
        "and shape"
    nm, nt = len(spec.scan_measures), len(spec.scan_transforms)
    return (
        f"{same} partition was computed for {nm} measure{'s' if nm != 1 else ''} "
        f"({', '.join(_measure_label(m) for m in spec.scan_measures)}) under "
        f"{nt} transformation{'s' if nt != 1 else ''} "
        f"({', '.join(map(str, spec.scan_transforms))})"
        + (f", each with intervals from {spec.scan_n_boot} replicates." if spec.scan_n_boot
           else "."))


def _choice_words(choice: dict) -> str:
    """``"square-root transformed Bray-Curtis (shape: hellinger)"``."""
    tr = choice["transform"]
    text = _measure_label(choice["measure"])
    if tr not in (None, "none"):
        text = f"{_transform_words(tr).split(' (')[0]} {text}"
    extra = [f"{k}: {choice[k]}" for k in ("size", "shape", "shape_dims")
             if choice[k] != {"size": "log_total", "shape": "chi_square",
                              "shape_dims": None}[k]]
    return text + (f" ({', '.join(extra)})" if extra else "")


def _resampled_units(results, spec) -> str:
    units = results.units if results is not None else None
    if units is not None and units.plan is not None and not units.plan.independent:
        return f"whole units of {units.plan.levels[0].name!r}"
    if results is None and spec.unit_columns:
        return f"whole units of {spec.unit_columns[0]!r}"
    return "samples"


def _ordination_words(spec, results, measure) -> str:
    from .wording import measure_phrase
    if spec.ordination == "pcoa":
        corr = {None: "", "lingoes": " with the Lingoes (1971) correction for negative "
                                     "eigenvalues",
                "cailliez": " with the Cailliez (1983) correction for negative "
                            "eigenvalues"}[spec.correction]
        ordi = f"principal coordinates analysis (PCoA; Gower 1966){corr}"
    else:
        ordi = "non-metric multidimensional scaling (Kruskal 1964; best of several seeded starts)"
    sent = f"Samples were ordinated by {ordi} of the {measure_phrase(spec.measure)}"
    if spec.group and spec.ellipse:
        sent += f", with {_ellipse_words(spec.ellipse, spec.ellipse_level)} by {spec.group}"
        units = results.units if results is not None else None
        if spec.ellipse in ("confidence", "bootstrap") and units is not None and \
                units.plan is not None and not units.plan.independent:
            sent += ("; drawn from the samples as if independent, these regions are "
                     "descriptive (the tests count units)")
    return sent + "."


def _ellipse_words(kind: str, level: float) -> str:
    """What the ellipses of a kind cover (the same statements as their legends)."""
    import numpy as np
    from scipy import stats
    pct = f"{100 * level:g} %"
    if kind == "confidence":
        return (f"{pct} confidence ellipses (regions for each group's true centre; "
                "Hotelling 1931)")
    if kind == "prediction":
        return (f"{pct} prediction ellipses (each holds a new sample of its group with "
                f"probability {pct}; Hotelling 1931)")
    if kind == "bootstrap":
        return (f"{pct} bootstrap ellipses (regions for each group's true centre from "
                "resampled centroids, with a small-sample factor; Efron & Tibshirani 1993)")
    sd = float(np.sqrt(stats.chi2.ppf(level, 2)))
    return (f"data ellipses (the spread of each group's samples, {sd:.2f} standard "
            "deviations; no coverage level)")


def _tests_words(spec, results) -> list[str]:
    from .wording import measure_phrase, size_test_words
    c = results.comparison if results is not None else None
    blocks = f", within blocks of {spec.blocks}" if spec.blocks else ""
    centre = "centroid" if spec.dispersion_centre == "mean" else "spatial median"
    if c is not None and c.size is not None:
        size = f"in size, by {size_test_words(c.size)}, and "
    elif c is not None:
        size = ""
    else:
        size = f"in size, by {_SIZE_METHOD_WORDS[spec.size_method]} of log total abundance, and "
    scheme = (getattr(c.shape, "scheme", "") or "") if c is not None else ""
    perms = scheme or f"{spec.n_permutations} permutations{blocks}"
    skipped = (f"Size was not compared: {c.size_skipped[:1].lower()}{c.size_skipped[1:]} "
               if c is not None and c.size is None and c.size_skipped else "")
    depth = c.depth if c is not None else None
    rare = (f" after every sample was rarefied once to {depth} individuals, so that unequal "
            "totals (and the counting noise they bring) cannot make shape or spread differ"
            if depth is not None else "")
    noise = (" with the counting noise expected at that depth removed from each distance"
             if depth is not None else "")
    out = [
        f"{skipped}Differences between {spec.group} groups were tested "
        f"{'separately ' if size else ''}{size}"
        f"in shape, by the Welch-type test of {measure_phrase(spec.shape_measure)}, which "
        "allows each group its own spread (Alekseyenko 2016; Hamidi et al. 2019)"
        f"{rare} ({perms}), and in spread, by the test of homogeneity "
        f"of multivariate dispersions (distances to the group {centre}, scaled by "
        "sqrt(n_g / (n_g - 1)) so that groups of different sizes with equal spread have "
        f"equal expected distances{noise}; Anderson 2006). PERMANOVA (Anderson 2001) of the "
        "same measure on all individuals is reported beside them for reference."]
    adjust = {"holm": "adjusted by Holm's (1979) method",
              "bh": "adjusted by the Benjamini & Hochberg (1995) false discovery rate",
              None: "not adjusted for multiple testing"}[spec.pairwise_adjust]
    stat = ("the Welch-type statistic" if spec.pairwise_statistic == "welch"
            else "PERMANOVA's pseudo-F")
    if results is None or results.pairwise is not None:
        out.append(f"Pairwise contrasts between groups used {stat} on the same units, "
                   f"{adjust}.")
    return out


def _tried_words(spec, results) -> str:
    """How many choices of the shape measure were looked at, and the adjusted p-value."""
    from ..core.display import p_words
    from ..core.choice_record import spec_choices
    entries, current = spec_choices(spec)
    if len(entries) < 2:
        return ""
    j = results.choice_adjusted if results is not None else None
    k = j.n_choices if j is not None else len(entries)
    names = ", ".join(_measure_label(t.choice.measure) if t.choice.transform == "none"
                      and not t.choice.options else t.name for t in entries)
    reported = _measure_label(spec.shape_measure)
    if current is not None and current.origin in ("scan", "audit"):
        why = ("the scan, which never looks at the groups" if current.origin == "scan" else
               "the audit, which only looks at tables simulated without group differences")
        head = (f"The {reported} measure was chosen in {why}, so its own p-value needs no "
                f"adjustment; still, the p-values of {k} choices of measure ({names}) were "
                "looked at, so")
    else:
        head = (f"The {reported} measure was kept after the p-values of {k} choices of "
                f"measure ({names}) had been looked at, so")
    perms = (f"the same {j.n_permutations} relabellings" if j is not None and not j.exact
             else "every distinct relabelling" if j is not None else
             f"the same {spec.n_permutations} relabellings")
    every = "both" if k == 2 else f"all {k}"
    text = (f"{head} PERMANOVA of {spec.group} was repeated with each of them on {perms} and "
            f"the p-value of {reported} adjusted for {every} by single-step min-P (Westfall "
            "& Young 1993)")
    if j is not None and current is not None and current.name in j.pvalue_adjusted.index:
        text += (f": {p_words(j.pvalue_adjusted[current.name])} (own "
                 f"{p_words(j.pvalue[current.name])})")
    return text + "."


def _permanova_words(spec, results, measure) -> str:
    from .wording import measure_phrase, plural
    terms = " + ".join(spec.model_terms)
    p = results.permanova if results is not None else None
    units = results.units if results is not None else None
    plan = units.plan if units is not None else None
    detail = ""
    if p is not None and plan is not None and not plan.independent:
        rows = []
        for t in p.terms:
            row = p.table.loc[t]
            lv = plan.level_of(t)
            noun = plural((lv or plan.levels[-1]).name, 2).split(" ", 1)[1]
            where = f"between {noun}" if lv is not None else f"within {noun}"
            against = str(row["tested_against"])
            against = (f"the residual {'among' if lv is not None else 'within'} {noun}"
                       if against.startswith("Residual") else against)
            rows.append(f"{t} {where} against {against} ({row['df_denominator']} df)")
        detail = "; " + ", ".join(rows)
    if p is not None and p.schemes is not None:
        perms = "; ".join(f"{t}: {p.schemes.loc[t, 'permutations']}" for t in p.terms)
    else:
        perms = (f"{spec.n_permutations} permutations"
                 + (f" within blocks of {spec.blocks}" if spec.blocks else ""))
    return (f"A PERMANOVA of the {measure_phrase(spec.measure)} with the terms {terms} "
            f"({spec.ss} sums of squares{detail}) shows what the chosen measure itself "
            "responds to; each term was tested by permuting the residuals of the model "
            "without it (Freedman & Lane 1983; Anderson & ter Braak 2003), so that its "
            f"p-value does not depend on its place among the terms of a balanced design "
            f"({perms}).")


def _taxa_words(spec, results) -> str:
    from .wording import measure_phrase
    contrast = (f"{spec.contrast[0]} and {spec.contrast[1]}" if spec.contrast else
                "the first two groups")
    k = results.contributions if results is not None else None
    if k is not None:
        contrast = f"{k.a} and {k.b}"
    if k is not None and k.interval_method == "none":
        ci = "without intervals (too few replicates per group)"
    else:
        unit = "sample"
        if k is not None and k.provenance.get("units"):
            unit = f"unit of {k.provenance['units']!r}"
        ci = (f"with delete-one jackknife-t intervals (one {unit} left out at a time; Efron "
              "& Tibshirani 1993)")
    return (f"Taxon contributions to the shape difference between {contrast} were computed "
            "as the per-taxon split of the squared distance between group centroids "
            f"({measure_phrase(spec.contribution_measure)}), corrected for sampling noise, "
            f"{ci}, next to per-taxon log2 ratios of mean abundance for the size difference.")


def _audit_words(spec, measure) -> str:
    from .wording import measure_phrase
    model = ("Dirichlet-multinomial sampling (Mosimann 1962) with the overdispersion "
             "estimated within groups" if spec.audit_model == "dirichlet_multinomial"
             else "multinomial sampling")
    return (f"Finally, the rate at which the {measure} PERMANOVA would report a compositional "
            f"difference when only size differs was estimated on {spec.audit_n_sim} simulated "
            f"tables that keep every sample's total and draw its counts from one pooled "
            f"composition ({model}), each tested with {spec.audit_n_permutations} "
            f"permutations at alpha = {spec.alpha:g}, next to "
            f"{measure_phrase(spec.audit_reference)} as a size-free reference (Clopper & "
            "Pearson 1934 intervals).")


def methods_text(spec, results=None, *, software: dict | None = None) -> str:
    """A methods paragraph naming every choice of ``spec``; with ``results``, what the run
    actually did (the sampling units and strata, the size test used, the permutation
    schemes, the shape dimensions chosen from the data)."""
    from ..core.analysis import software_versions
    from .wording import measure_phrase
    sw = software or (results.software if results is not None else software_versions())
    measure = _measure_label(spec.measure)
    parts = [_data_sentence(spec, results, sw)]
    parts.extend(_abundance_words(spec))
    parts.extend(_units_words(spec, results))
    parts.append(f"Abundances were {_transform_words(spec.transform)} and compared with "
                 f"{measure_phrase(spec.measure)}.")

    def ran(step):          # the paragraph describes what ran, not what the spec hoped
        return results is None or getattr(results, step) is not None
    if ran("size_shape"):
        parts.extend(_partition_words(spec, results, measure))
    if ran("scan") and (results is None or results.scan.to_frame()["size_only"].notna().any()):
        parts.append(_scan_words(spec, results))
    if ran("ordination"):
        parts.append(_ordination_words(spec, results, measure))
    if spec.group:
        if ran("comparison"):
            parts.extend(_tests_words(spec, results))
        if ran("choice_adjusted") and _tried_words(spec, results):
            parts.append(_tried_words(spec, results))
        if spec.model_terms and ran("permanova"):
            parts.append(_permanova_words(spec, results, measure))
        if ran("contributions"):
            parts.append(_taxa_words(spec, results))
        if ran("audit"):
            parts.append(_audit_words(spec, measure))
    if results is not None and results.skipped:
        parts.append("Not run on these data (the report says why): "
                     + ", ".join(_STEP_WORDS.get(k, k) for k in results.skipped) + ".")
    parts.append(CALIBRATION_SENTENCE)
    parts.append(f"Every random step used the seed {spec.seed}." if spec.seed is not None
                 else "Random steps were not seeded (results vary slightly between runs).")
    return " ".join(parts)


def methods_references(text: str) -> list[str]:
    """The full references of the works cited in ``text``, in the order first cited."""
    import re
    found = []
    for key, (authors, year) in _CITED_AS.items():
        pattern = (r"(?<!& )(?<![\w-])" + re.escape(authors) + r"(?:'s)? \(?" + year
                   + r"(?!\d)")
        m = re.search(pattern, text)
        if m:
            found.append((m.start(), key))
    return [REFERENCES[k] for _, k in sorted(found)]
