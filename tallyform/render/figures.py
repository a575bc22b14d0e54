"""One place that knows which figure each result draws: ``result.figure(kind=...)``.

Every result object's ``figure(kind=None, **options)`` comes from
:class:`tallyform.core.results.ResultMixin`, which imports this module (the one spot where
the core reaches the outer ring, lazily, so that the core never needs plotly). The kinds of
each result are registered here with :func:`functools.singledispatch`; the first kind listed
is the default. Options go to the drawing function named in each entry.
"""
from __future__ import annotations

from functools import singledispatch

from ..core.audit import AuditResult
from ..core.choice_adjusted import ChoiceAdjustedResult
from ..core.choices import ChoiceComparison
from ..core.comparison import ComparisonResult
from ..core.constraint_tests import ConstraintTest
from ..core.contributions import TaxonContributions
from ..core.counting_results import CountingTestResult
from ..core.dispersion import DispersionResult
from ..core.ellipses import EllipseSet
from ..core.errors import InputError
from ..core.inference import PermanovaResult
from ..core.ordination import Ordination
from ..core.outliers import OutlierSamples
from ..core.pairwise import PairwiseResult
from ..core.partition import SizeShapeResult
from ..core.permutation import PermutationTest
from ..core.scan import ScanResult
from ..core.size_tests import SizeTestResult
from ..core.welch import WelchResult
from . import choice_plots as cp
from . import inference_plots as ip
from . import ordination_plots as op
from . import partition_plots as pp
from . import result_plots as rp
from . import taxa_plots as tp

__all__ = ["figure_for", "figure_kinds"]


@singledispatch
def _kinds(result) -> dict:
    raise InputError(f"{type(result).__name__} has no figure; its tables() hold the numbers.")


def _register(cls, kinds: dict) -> None:
    _kinds.register(cls)(lambda result: kinds)


def _constraint_null(result: ConstraintTest, *, row: str | None = None, **kwargs):
    one = result.row_test(row)
    fig = ip.null_distribution_figure(one, **kwargs)
    text = fig.layout.title.text or ""
    what = f"{result.method}: {one.path}" + (" (first eigenvalue given earlier axes)"
                                             if result.scope == "each_axis" else "")
    return fig.update_layout(title_text=text.replace("Permutation test", what, 1))


def _counting_null(result: CountingTestResult, **kwargs):
    fig = ip.null_distribution_figure(result.as_test(), **kwargs)
    return fig.update_layout(title_text=result._title())


def _counting_distances(result: CountingTestResult, **kwargs):
    if result.aspect != "spread":
        raise InputError("kind='distances' is drawn for spread tests only.")
    return ip.dispersion_figure(result.as_test(), **kwargs)


def _comparison(part: str):
    def draw(result: ComparisonResult, **kwargs):
        if part == "shape":
            return result.shape.figure(**kwargs)
        if part == "spread":
            return result.dispersion.figure("distances", **kwargs)
        if part == "size":
            return rp.size_test_figure(result.size, **kwargs)
        if result.permanova is None:
            raise InputError("this comparison kept no PERMANOVA (compare_groups(..., "
                             "permanova=True) keeps one for reference).")
        return result.permanova.figure(**kwargs)
    return draw


_register(AuditResult, {"rates": ip.audit_figure})
_register(ChoiceAdjustedResult, {"pvalues": cp.choice_adjusted_figure})
_register(ChoiceComparison, {"differences": pp.choice_difference_figure})
_register(ConstraintTest, {"null": _constraint_null})
_register(TaxonContributions, {"shape": tp.taxon_shape_figure, "size": tp.taxon_size_figure})
_register(CountingTestResult, {"null": _counting_null, "distances": _counting_distances})
_register(DispersionResult, {"distances": ip.dispersion_figure,
                             "null": ip.null_distribution_figure})
_register(PermanovaResult, {"null": ip.null_distribution_figure})
_register(PermutationTest, {"null": ip.null_distribution_figure})
_register(WelchResult, {"null": ip.null_distribution_figure})
_register(Ordination, {"samples": op.ordination_figure, "scree": op.scree_figure})
_register(SizeShapeResult, {"bars": pp.partition_bars, "dims": pp.dims_figure})
_register(ScanResult, {"heatmap": pp.scan_heatmap, "bars": pp.partition_bars})
_register(ComparisonResult, {"shape": _comparison("shape"), "spread": _comparison("spread"),
                             "size": _comparison("size"), "permanova": _comparison("permanova")})
_register(SizeTestResult, {"groups": rp.size_test_figure})
_register(PairwiseResult, {"pairs": rp.pairwise_figure})
_register(OutlierSamples, {"scores": rp.outlier_figure})
_register(EllipseSet, {"outlines": rp.ellipse_figure})


def figure_kinds(result) -> tuple[str, ...]:
    """The kinds of figure ``result`` draws, the default first."""
    return tuple(_kinds(result))


def figure_for(result, kind: str | None = None, **kwargs):
    """The figure of ``result`` of the given kind (None: its default kind)."""
    kinds = _kinds(result)
    if kind is None:
        kind = next(iter(kinds))
    if kind not in kinds:
        raise InputError(f"`kind` must be one of {list(kinds)} for "
                         f"{type(result).__name__}; got {kind!r}.")
    return kinds[kind](result, **kwargs)
