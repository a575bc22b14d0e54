"""The methods paragraph: every choice of the spec in words, with the published references."""
from __future__ import annotations

__all__ = ["methods_text", "methods_references", "REFERENCES"]

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
                      "negbin": "a negative-binomial GLM of the totals with a log-effort "
                                "offset"}
_ELLIPSE_WORDS = {"confidence": "confidence ellipses of the group centroids (Hotelling 1931)",
                  "prediction": "prediction ellipses for a new sample",
                  "data": "normal-theory data ellipses",
                  "bootstrap": "bootstrap ellipses of the group centroids"}


def _transform_words(name: str) -> str:
    if name in _TRANSFORM_WORDS:
        return _TRANSFORM_WORDS[name]
    if name.startswith("power("):
        return f"raised to the power {name[6:-1]}"
    return f"transformed ({name})"


def _measure_label(name: str) -> str:
    from ..core.measures import MEASURES
    rec = MEASURES.get(name)
    return getattr(rec, "label", name) if rec is not None else name


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


def methods_text(spec, results=None, *, software: dict | None = None) -> str:
    """A methods paragraph naming every choice of ``spec`` (and, with ``results``, the
    numbers decided from the data, such as the shape dimensions used)."""
    from ..core.analysis import software_versions
    sw = software or (results.software if results is not None else software_versions())
    parts = []
    if results is not None:
        t = results.table
        parts.append(f"Abundances of {t.n_taxa} taxa in {t.n_samples} samples were analysed "
                     f"with tallyform {sw.get('tallyform', '?')}")
    else:
        parts.append(f"Abundances were analysed with tallyform {sw.get('tallyform', '?')}")
    parts[-1] += (f" (Python {sw.get('python', '?')}, numpy {sw.get('numpy', '?')}, scipy "
                  f"{sw.get('scipy', '?')}, pandas {sw.get('pandas', '?')}, statsmodels "
                  f"{sw.get('statsmodels', '?')}).")
    parts.extend(_abundance_words(spec))
    measure = _measure_label(spec.measure)
    parts.append(f"Abundances were {_transform_words(spec.transform)} and compared with the "
                 f"{measure} dissimilarity.")
    k = None
    if results is not None and results.size_shape is not None:
        k = results.size_shape.shape_dims
    dims = (f"the {spec.shape_dims} leading principal coordinates" if spec.shape_dims
            else (f"the {k} leading principal coordinates (the fewest holding 75 % of the "
                  "shape inertia, at most (n - 2) / 3)" if k else
                  "the fewest leading principal coordinates holding 75 % of the shape "
                  "inertia, at most (n - 2) / 3"))
    perm = (f"each tested with {spec.n_permutations} permutations of residuals under the "
            "reduced model (Freedman & Lane 1983)" if spec.n_permutations else "not tested")
    parts.append(
        "To separate differences in total abundance (size) from differences in composition "
        "(shape), the variation of this dissimilarity was partitioned by distance-based "
        "redundancy analysis (db-RDA; Legendre & Anderson 1999; McArdle & Anderson 2001) "
        f"between a size predictor, {_SIZE_WORDS[spec.size]}, and shape predictors, {dims} of "
        f"{_SHAPE_WORDS[spec.shape]}, using adjusted R² (Ezekiel 1930) and the fractions of "
        "Borcard et al. (1992) and Peres-Neto et al. (2006); the size-only and shape-only "
        f"fractions were {perm}.")
    parts.append(
        f"The same partition was computed for {len(spec.scan_measures)} measures "
        f"({', '.join(_measure_label(m) for m in spec.scan_measures)}) under "
        f"{len(spec.scan_transforms)} transformations "
        f"({', '.join(map(str, spec.scan_transforms))}).")
    if spec.ordination == "pcoa":
        corr = {None: "", "lingoes": " with the Lingoes (1971) correction for negative "
                                     "eigenvalues",
                "cailliez": " with the Cailliez (1983) correction for negative "
                            "eigenvalues"}[spec.correction]
        ordi = f"principal coordinates analysis (PCoA; Gower 1966){corr}"
    else:
        ordi = "non-metric multidimensional scaling (Kruskal 1964; best of several seeded starts)"
    sent = f"Samples were ordinated by {ordi} of the {measure} dissimilarities"
    if spec.group and spec.ellipse:
        sent += (f", with {_ELLIPSE_WORDS[spec.ellipse]} at the "
                 f"{100 * spec.ellipse_level:g} % level for each {spec.group} group")
    parts.append(sent + ".")
    if spec.group:
        blocks = f", permuting within {spec.blocks}" if spec.blocks else ""
        centre = "centroid" if spec.dispersion_centre == "mean" else "spatial median"
        adjust = {"holm": "adjusted by Holm's (1979) method",
                  "bh": "adjusted by the Benjamini & Hochberg (1995) false discovery rate",
                  None: "not adjusted for multiple testing"}[spec.pairwise_adjust]
        parts.append(
            f"Differences between {spec.group} groups were tested separately in size, with "
            f"{_SIZE_METHOD_WORDS[spec.size_method]} of log total abundance, and in shape, by "
            f"PERMANOVA (Anderson 2001) of {_measure_label(spec.shape_measure)} distances "
            f"({spec.n_permutations} permutations{blocks}), with the homogeneity of "
            f"multivariate dispersions (distances to the group {centre}; Anderson 2006) "
            f"tested alongside; pairwise contrasts between groups were {adjust}.")
        terms = " + ".join(spec.model_terms)
        parts.append(
            f"A PERMANOVA of the {measure} dissimilarities with the terms {terms} "
            f"({spec.ss} sums of squares, {spec.n_permutations} permutations{blocks}) shows "
            "what the chosen measure itself responds to.")
        contrast = (f"{spec.contrast[0]} and {spec.contrast[1]}" if spec.contrast else
                    "the first two groups")
        parts.append(
            f"Taxon contributions to the shape difference between {contrast} were computed "
            f"as the per-taxon split of the squared distance between group centroids in "
            f"{_measure_label(spec.contribution_measure)} space, with bootstrap intervals "
            "(samples resampled within groups), next to per-taxon log2 ratios of mean "
            "abundance for the size difference.")
        model = ("Dirichlet-multinomial sampling (Mosimann 1962) with the overdispersion "
                 "estimated within groups" if spec.audit_model == "dirichlet_multinomial"
                 else "multinomial sampling")
        parts.append(
            f"Finally, the rate at which the {measure} PERMANOVA would report a compositional "
            f"difference when only size differs was estimated on {spec.audit_n_sim} simulated "
            f"tables that keep every sample's total and draw its counts from one pooled "
            f"composition ({model}), each tested with {spec.audit_n_permutations} "
            f"permutations at alpha = {spec.alpha:g}, next to the "
            f"{_measure_label(spec.audit_reference)} dissimilarity as a size-free reference "
            "(Clopper & Pearson 1934 intervals).")
    parts.append(f"Every random step used the seed {spec.seed}." if spec.seed is not None
                 else "Random steps were not seeded (results vary slightly between runs).")
    return " ".join(parts)


def methods_references(text: str) -> list[str]:
    """The full references of the works cited in ``text`` (by first author and year)."""
    out = []
    for ref in REFERENCES.values():
        author = ref.split(" ", 1)[0].rstrip(",")
        year = ref.split("(", 1)[1][:4]
        if author in text and year in text:
            out.append(ref)
    return out
