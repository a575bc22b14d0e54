"""AnalysisSpec: every choice of an analysis, as data (JSON round trip), and ``run()``.

The dashboard edits a spec, the report embeds it, the methods paragraph is written from it,
and ``tly.run(spec, table)`` recomputes every result from it, so a shared notebook or report
can be reproduced without the widgets. Loading a spec reads JSON only (never code) and checks
every key and value.
"""
from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass, field, fields
from pathlib import Path

import numpy as np

from .audit import MODELS
from .comparison import SHAPE_MEASURES
from .dispersion import CENTRES
from .eigen import CORRECTIONS
from .ellipses import ELLIPSE_KINDS
from .errors import InputError
from .inference import ADJUST_METHODS, SS_TYPES
from .pairwise import PAIRWISE_STATISTICS
from .partition_math import SHAPE_OPTIONS, SIZE_OPTIONS
from .size_tests import SIZE_METHODS

__all__ = ["AnalysisSpec", "SPEC_VERSION"]

SPEC_VERSION = 1

#: the options of every choice a spec records, read from the core modules that check them
#: (one home for every list: the CLI and the widgets read them from here)
SPEC_CHOICES = {
    "size": SIZE_OPTIONS,
    "shape": SHAPE_OPTIONS,
    "shape_measure": SHAPE_MEASURES,
    "size_method": SIZE_METHODS,
    "pairwise_adjust": ADJUST_METHODS,
    "dispersion_centre": CENTRES,
    "ordination": ("pcoa", "nmds"),
    "correction": CORRECTIONS,
    "ellipse": ELLIPSE_KINDS + (None,),
    "ss": SS_TYPES,
    "audit_model": MODELS,
    "pairwise_statistic": PAIRWISE_STATISTICS,
}
#: reader options a spec may record under ``source`` (keywords of ``tly.read_counts``)
SOURCE_KEYS = ("counts", "samples", "rows", "id_column", "taxa", "effort", "sheet",
               "samples_sheet", "samples_id_column", "encoding", "sep", "decimal",
               "thousands", "header_row", "empty")
#: keys of ``compare_with`` (the second choice of ``tly.compare_choices``)
COMPARE_KEYS = ("measure", "transform", "size", "shape", "shape_dims")
DEFAULT_SCAN_MEASURES = ("euclidean", "manhattan", "bray_curtis", "canberra", "chi_square",
                         "hellinger", "chord", "jaccard")
DEFAULT_SCAN_TRANSFORMS = ("none", "sqrt", "fourth_root", "presence", "log1p")


@dataclass(frozen=True)
class AnalysisSpec:
    """Every choice of a size-and-shape analysis.

    Parameters
    ----------
    group : str, optional
        Sample column of the groups compared (treatment, habitat...). Needed by the tests,
        ellipses, contributions and the audit.
    terms : tuple of str, optional
        PERMANOVA terms (default: just ``group``); interactions written ``"a:b"``.
    blocks : str, optional
        Column of blocks: permutations stay within them.
    transform : str
        Transformation before the measure: ``'none'``, ``'sqrt'``, ``'fourth_root'``,
        ``'log1p'``, ``'presence'``, ``'power(0.3)'``...
    measure : str
        The dissimilarity under study (a key of ``tallyform.MEASURES``).
    size, shape, shape_dims
        The size predictor, the shape basis and its dimensions (see ``tly.size_shape``).
    shape_measure : str
        Size-free measure of the shape test (``tly.compare_groups``).
    size_method : str
        Univariate test of log totals.
    n_permutations : int
    seed : int or None
        Seed of every random stream (each step gets its own stream spawned from it).
    ss : {'sequential', 'marginal'}
        Sums of squares of the PERMANOVA table.
    pairwise_adjust, dispersion_centre, ordination, correction, ellipse, ellipse_level
    scan_measures, scan_transforms : tuple
        The grid of the scan.
    contrast : tuple (a, b), optional
        The two groups whose taxon contributions are shown (default: the first two levels).
    contribution_measure : str
    audit_n_sim, audit_n_permutations, audit_model, audit_reference
        The audit: simulated tables, permutations per test, sampling model, reference.
    alpha : float
        Level used in the plain-language readings (p-values are always reported as they are).
    abundance : {'absolute', 'relative'}, optional
        What the table's totals mean, as the table was read (None: not recorded). With
        ``load`` (a sample column) or ``spike_in`` (``{'taxon': ..., 'added': ...}``) it
        says where the absolute sizes of relative data come from. The table is read with
        these keywords (``spec.table_options()``); ``run`` checks that it was.
    units : None, False, str or tuple of str
        The sampling units (tank, site, plot) whose samples are not independent replicates:
        a column, or nested columns coarsest first (``["site", "plot"]``). None detects them
        from the design (a column within which a tested factor is constant); False treats
        every sample as an independent replicate. ``run`` resolves them once and every step
        uses the same units (tests count units; intervals leave out whole units).
    n_boot : int
        Leave-out replicates of the 95 % intervals of the partition's shares (and of
        ``compare_with``); 0 gives none. 999 take about 0.4 s at 60 samples.
    scan_n_boot : int
        The same for every cell of the scan (0: none; 199 take about 3 s for the default
        grid at 60 samples).
    pairwise_statistic : {'pseudo_f', 'welch'}
        Statistic of the pairwise contrasts: PERMANOVA's pseudo-F, or the Welch-type
        statistic, which allows each group its own spread.
    compare_with : dict, optional
        A second choice (keys ``measure``, ``transform``, ``size``, ``shape``,
        ``shape_dims``; missing keys keep this spec's) whose partition is compared with
        this spec's choice by ``tly.compare_choices``.
    source : dict, optional
        Where the table comes from, so that ``spec.code()`` can read it: ``{"demo":
        "mesocosm"}``, or ``tly.read_counts`` keywords with the file as ``counts``
        (``{"counts": "counts.csv", "samples": "samples.csv", "effort": "trap_nights"}``).
        ``abundance``, ``load`` and ``spike_in`` stay keys of their own.
    choices_tried : tuple of dict, optional
        Every choice of measure (and transformation, and measure options) whose shape test
        p-value was shown for ``group`` before this one was kept, as the dashboard records
        them: ``{"measure": "hellinger", "transform": "none"}``, with ``"origin": "scan"``
        or ``"audit"`` when the choice was made there (no key: made after seeing
        p-values). With two or more distinct choices (``shape_measure`` counted among
        them), ``run`` adds ``tly.choice_adjusted`` over them, and the report and the
        methods give the p-value adjusted for all of them.
    """

    group: str | None = None
    terms: tuple | None = None
    blocks: str | None = None
    transform: str = "none"
    measure: str = "bray_curtis"
    size: str = "log_total"
    shape: str = "chi_square"
    shape_dims: int | None = None
    shape_measure: str = "chi_square"
    size_method: str = "welch"
    n_permutations: int = 999
    seed: int | None = 1
    ss: str = "sequential"
    pairwise_adjust: str | None = "holm"
    dispersion_centre: str = "mean"
    ordination: str = "pcoa"
    correction: str | None = None
    ellipse: str | None = "confidence"
    ellipse_level: float = 0.95
    scan_measures: tuple = DEFAULT_SCAN_MEASURES
    scan_transforms: tuple = DEFAULT_SCAN_TRANSFORMS
    contrast: tuple | None = None
    contribution_measure: str = "hellinger"
    audit_n_sim: int = 200
    audit_n_permutations: int = 199
    audit_model: str = "dirichlet_multinomial"
    audit_reference: str = "chi_square"
    alpha: float = 0.05
    abundance: str | None = None
    load: str | None = None
    spike_in: dict | None = None
    units: object = None
    n_boot: int = 999
    scan_n_boot: int = 0
    pairwise_statistic: str = "pseudo_f"
    compare_with: dict | None = None
    source: dict | None = None
    choices_tried: tuple | None = None
    version: int = field(default=SPEC_VERSION)

    def __post_init__(self):
        for name in ("terms", "scan_measures", "scan_transforms", "contrast", "units"):
            v = getattr(self, name)
            if isinstance(v, list):
                object.__setattr__(self, name, tuple(v))
        if isinstance(self.choices_tried, (list, tuple)):             # private copies
            object.__setattr__(self, "choices_tried", tuple(
                dict(c) if isinstance(c, dict) else c for c in self.choices_tried))
        for name in ("spike_in", "compare_with", "source"):      # private copies
            v = getattr(self, name)
            if isinstance(v, dict):
                object.__setattr__(self, name, dict(v))
        if isinstance(self.units, tuple) and len(self.units) == 1:
            object.__setattr__(self, "units", self.units[0])
        self.validate()

    # ------------------------------------------------------------------ checks
    def validate(self, table=None) -> "AnalysisSpec":
        """Check every value (and, given a table, that the named columns exist)."""
        from .measures import MEASURES
        from .transforms import get_transform
        for key, allowed in SPEC_CHOICES.items():
            if getattr(self, key) not in allowed:
                raise InputError(f"spec key {key!r} must be one of {list(allowed)}; got "
                                 f"{getattr(self, key)!r}.")
        for key in ("measure", "contribution_measure", "audit_reference"):
            if getattr(self, key) not in MEASURES:
                raise InputError(f"spec key {key!r} must name a measure "
                                 f"({sorted(MEASURES)}); got {getattr(self, key)!r}.")
        for m in self.scan_measures:
            if m not in MEASURES:
                raise InputError(f"spec key 'scan_measures' names unknown measure {m!r}.")
        for key, value in [("transform", self.transform)] + [
                ("scan_transforms", t) for t in self.scan_transforms]:
            try:
                get_transform(value)
            except InputError as err:
                raise InputError(f"spec key {key!r}: {err}") from None
        _int_key("n_permutations", self.n_permutations, low=0)
        _int_key("audit_n_sim", self.audit_n_sim, low=1)
        _int_key("audit_n_permutations", self.audit_n_permutations, low=19)
        _int_key("n_boot", self.n_boot, low=0)
        _int_key("scan_n_boot", self.scan_n_boot, low=0)
        if self.shape_dims is not None:
            _int_key("shape_dims", self.shape_dims, low=1)
        if self.seed is not None:
            _int_key("seed", self.seed, low=0)
        for key in ("alpha", "ellipse_level"):
            v = getattr(self, key)
            if not isinstance(v, (int, float)) or isinstance(v, bool) or not 0 < v < 1:
                raise InputError(f"spec key {key!r} must be a number between 0 and 1; got "
                                 f"{v!r}.")
        for key in ("group", "blocks"):
            v = getattr(self, key)
            if v is not None and not isinstance(v, str):
                raise InputError(f"spec key {key!r} must be a column name (text); got {v!r}.")
        if self.terms is not None and (not self.terms or
                                       not all(isinstance(t, str) for t in self.terms)):
            raise InputError("spec key 'terms' must be a non-empty list of column names.")
        if self.contrast is not None and (len(self.contrast) != 2 or
                                          self.contrast[0] == self.contrast[1]):
            raise InputError("spec key 'contrast' must name two different groups.")
        self._validate_abundance(table)
        self._validate_units()
        self._validate_compare_with()
        self._validate_source()
        self._validate_choices_tried()
        if table is not None:
            cols = set(table.samples.columns)
            named = [self.group, self.blocks] + [p for t in self.model_terms
                                                 for p in t.split(":")] + self.unit_columns
            for c in named:
                if c is not None and c not in cols:
                    raise InputError(f"the spec names column {c!r}, which is not in the "
                                     f"sample table (columns: {sorted(map(str, cols))}).")
        return self

    def _validate_abundance(self, table) -> None:
        """``abundance``, ``load`` and ``spike_in`` are valid, and describe ``table``."""
        if self.abundance not in (None, "absolute", "relative"):
            raise InputError("spec key 'abundance' must be 'absolute', 'relative' or null; got "
                             f"{self.abundance!r}.")
        if self.load is not None and not isinstance(self.load, str):
            raise InputError(f"spec key 'load' must be a column name (text); got {self.load!r}.")
        if self.spike_in is not None and not (
                isinstance(self.spike_in, dict) and set(self.spike_in) == {"taxon", "added"}
                and all(isinstance(v, str) for v in self.spike_in.values())):
            raise InputError("spec key 'spike_in' must be {\"taxon\": label, \"added\": column}; "
                             f"got {self.spike_in!r}.")
        if (self.load is not None or self.spike_in is not None) and self.abundance != "relative":
            raise InputError("spec keys 'load' and 'spike_in' go with abundance 'relative'; got "
                             f"abundance {self.abundance!r}.")
        if self.load is not None and self.spike_in is not None:
            raise InputError("the spec gives both 'load' and 'spike_in'; keep one.")
        if table is None or self.abundance is None:
            return
        have = self.options_of(table)
        want = {"abundance": self.abundance, "load": self.load, "spike_in": self.spike_in}
        if have != want:
            shown = ", ".join(f"{k}={v!r}" for k, v in self.table_options().items())
            raise InputError(
                f"the spec says the table was read with {shown}, but it was read with "
                + ", ".join(f"{k}={v!r}" for k, v in have.items() if v is not None) + ".",
                hint=f"Read the table with {shown} (e.g. tly.read_counts(..., {shown})), or "
                     "change the spec.")

    def _validate_units(self) -> None:
        u = self.units
        if u is None or u is False:
            return
        names = u if isinstance(u, tuple) else (u,)
        if not names or not all(isinstance(x, str) and x.strip() for x in names):
            raise InputError("spec key 'units' must be null (detect), false (independent "
                             "samples), a column name or a list of nested column names "
                             f"(coarsest first); got {u!r}.")
        if len(set(names)) != len(names):
            raise InputError(f"spec key 'units' lists a column twice: {list(names)}.")

    @property
    def unit_columns(self) -> list:
        """The columns named by ``units`` (empty when detected or independent)."""
        u = self.units
        if u is None or u is False:
            return []
        return list(u) if isinstance(u, tuple) else [u]

    def _validate_compare_with(self) -> None:
        cw = self.compare_with
        if cw is None:
            return
        if not isinstance(cw, dict) or not cw or set(cw) - set(COMPARE_KEYS):
            raise InputError("spec key 'compare_with' must be a non-empty object with keys "
                             f"from {list(COMPARE_KEYS)}; got {cw!r}.")
        from .measures import MEASURES
        from .transforms import get_transform
        if "measure" in cw and cw["measure"] not in MEASURES:
            raise InputError(f"spec key 'compare_with' names unknown measure "
                             f"{cw['measure']!r}.")
        if cw.get("transform") is not None:
            try:
                get_transform(cw["transform"])
            except InputError as err:
                raise InputError(f"spec key 'compare_with': {err}") from None
        for key in ("size", "shape"):
            if key in cw and cw[key] not in SPEC_CHOICES[key]:
                raise InputError(f"spec key 'compare_with' {key!r} must be one of "
                                 f"{list(SPEC_CHOICES[key])}; got {cw[key]!r}.")
        if cw.get("shape_dims") is not None:
            _int_key("compare_with shape_dims", cw["shape_dims"], low=1)

    def _validate_source(self) -> None:
        src = self.source
        if src is None:
            return
        from .scenarios import demo_names
        if not isinstance(src, dict):
            raise InputError(f"spec key 'source' must be an object; got {src!r}.")
        if "demo" in src:
            if set(src) != {"demo"} or src["demo"] not in demo_names():
                raise InputError("spec key 'source' with 'demo' names a bundled scenario "
                                 f"({demo_names()}) and nothing else; got {src!r}.")
            return
        unknown = sorted(set(src) - set(SOURCE_KEYS))
        if unknown or not isinstance(src.get("counts"), str):
            raise InputError("spec key 'source' must give the counts file as 'counts' and "
                             f"reader options from {list(SOURCE_KEYS[1:])}"
                             + (f"; unknown key(s) {unknown}" if unknown else "") + ".",
                             hint="Loads and spike-ins are the spec keys 'abundance', "
                                  "'load' and 'spike_in'.")
        for k, v in src.items():
            ok = isinstance(v, int) and not isinstance(v, bool) if k == "header_row" \
                else v is None or isinstance(v, str)
            if not ok:
                raise InputError(f"spec key 'source': {k!r} must be "
                                 f"{'a whole number' if k == 'header_row' else 'text'}; "
                                 f"got {v!r}.")

    def _validate_choices_tried(self) -> None:
        tried = self.choices_tried
        if tried is None:
            return
        if not isinstance(tried, tuple) or not all(isinstance(c, dict) for c in tried):
            raise InputError("spec key 'choices_tried' must be a list of objects such as "
                             f"{{\"measure\": \"hellinger\", \"transform\": \"none\"}}; got "
                             f"{tried!r}.")
        from .choice_record import canonical_entries
        try:
            canonical_entries(tried)
        except InputError as err:
            raise InputError(f"spec key 'choices_tried': {err}") from None

    def table_options(self) -> dict:
        """Keywords for the readers and CommunityTable that read the table as the spec says
        (``abundance``, ``load``, ``spike_in``; empty when the spec does not record them)."""
        out = {"abundance": self.abundance, "load": self.load, "spike_in": self.spike_in}
        return {k: v for k, v in out.items() if v is not None}

    @classmethod
    def options_of(cls, table) -> dict:
        """The ``abundance``, ``load``, ``spike_in`` spec values that describe ``table``."""
        return {"abundance": table.abundance,
                "load": table.load_name if table.spike_in is None else None,
                "spike_in": table.spike_in}

    @property
    def model_terms(self) -> tuple:
        """PERMANOVA terms: ``terms``, or the group alone."""
        if self.terms:
            return tuple(self.terms)
        return (self.group,) if self.group else ()

    # ------------------------------------------------------------------ JSON
    def to_dict(self) -> dict:
        out = {}
        for f in fields(self):
            v = getattr(self, f.name)
            out[f.name] = [dict(x) if isinstance(x, dict) else x for x in v] \
                if isinstance(v, tuple) else dict(v) if isinstance(v, dict) else v
        return out

    def to_json(self, path=None, *, indent: int = 2) -> str:
        """The spec as JSON text (written atomically to ``path`` when given)."""
        text = json.dumps(self.to_dict(), indent=indent, ensure_ascii=False)
        if path is not None:
            from .fileio import write_text_atomic
            write_text_atomic(path, text + "\n")
        return text

    @classmethod
    def from_dict(cls, data: dict) -> "AnalysisSpec":
        if not isinstance(data, dict):
            raise InputError(f"an analysis spec must be a JSON object; got "
                             f"{type(data).__name__}.")
        known = {f.name for f in fields(cls)}
        unknown = [k for k in data if k not in known]
        if unknown:
            raise InputError(f"unknown spec key(s) {unknown}; known keys are "
                             f"{sorted(known)}.")
        if data.get("version", SPEC_VERSION) != SPEC_VERSION:
            raise InputError(f"spec key 'version' is {data['version']!r}; this tallyform reads "
                             f"version {SPEC_VERSION}.")
        try:
            return cls(**data)
        except TypeError as err:          # e.g. a list where a number belongs
            raise InputError(f"the spec has a value of the wrong kind: {err}.") from None

    @classmethod
    def from_json(cls, source) -> "AnalysisSpec":
        """Read a spec from JSON text or a ``.json`` file (JSON only: no code is executed)."""
        text = source
        name = None
        if isinstance(source, Path) or (isinstance(source, str) and
                                        not source.lstrip().startswith("{")):
            name = str(source)
            try:
                text = Path(source).read_text(encoding="utf-8")
            except OSError as err:
                raise InputError(f"cannot read the spec file {name!r}: {err.strerror}.") \
                    from None
        try:
            data = json.loads(text)
        except json.JSONDecodeError as err:
            where = f"{name!r}, " if name else ""
            raise InputError(f"the spec is not valid JSON ({where}line {err.lineno}, column "
                             f"{err.colno}: {err.msg}).") from None
        return cls.from_dict(data)

    def replace(self, **changes) -> "AnalysisSpec":
        """A copy with some choices changed (validated)."""
        known = {f.name for f in fields(self)}
        unknown = [k for k in changes if k not in known]
        if unknown:
            raise InputError(f"unknown spec key(s) {unknown}.")
        return dataclasses.replace(self, **changes)

    # ------------------------------------------------------------------ helpers
    def transform_arg(self):
        """The transform as passed to core functions (None for 'none')."""
        return None if self.transform == "none" else self.transform

    def code(self, table=None) -> str:
        """Python code that reproduces the analysis with public calls ("reproduce this").

        It reads the table (``tly.demo`` or ``tly.read_counts`` from ``source``, with the
        spec's ``abundance``, ``load`` and ``spike_in``), runs ``tly.run``, then makes the
        same calls step by step; pasted into a fresh session it gives the same numbers as
        ``tly.run(spec, table)``. With ``table`` (or a ``source`` that can be read), the
        sampling units and the default contrast are written out as resolved; otherwise the
        code resolves them as ``run`` does.
        """
        from .reproduce import spec_code
        return spec_code(self, table)


def _int_key(key, value, *, low):
    if not isinstance(value, (int, np.integer)) or isinstance(value, bool) or value < low:
        raise InputError(f"spec key {key!r} must be a whole number >= {low}; got {value!r}.")
