"""tallyform: is the difference between communities one of size, of shape, or both?

``import tallyform as tly`` loads the compute core only; figures (plotly) and the dashboard
(ipywidgets) are imported when first used.
"""
from __future__ import annotations

from . import errors
from .core.errors import DesignError, InputError, TooLargeError
from .core.constrained import ca, cca, db_rda, rda
from .core.constraint_tests import ConstraintTest, constraint_test
from .core.dispersion import dispersion_test
from .core.inference import pairwise_permanova, permanova
from .core.welch import WelchResult, welch_permanova
from .core.contributions import TaxonContributions, taxon_contributions
from .core.io import read_counts, read_darwin_core, read_long, read_samples
from .core.nmds import nmds
from .core.ordination import Ordination, pcoa
from .core.analysis import AnalysisResults, run
from .core.audit import AuditResult, audit
from .core.outliers import OutlierSamples, outlier_samples
from .core.partition import SizeShapeResult, size_shape
from .core.scan import ScanResult, scan
from .core.choices import ChoiceComparison, compare_choices
from .core.choice_adjusted import ChoiceAdjustedResult, choice_adjusted
from .core.scenarios import demo, demo_names
from .core.simulate import simulate_community
from .core.spec import AnalysisSpec
from .core.dissimilarity import Dissimilarity, dissimilarity, feature_matrix
from .core.measures import MEASURES, Measure, get_measure
from .core.memory import memory_limit, set_memory_limit
from .core.progress import get_progress, set_progress
from .core.comparison import compare_groups
from .core.counting import CountingTestResult, shape_test, spread_test
from .core.rarefaction import rarefied_table
from .core.size_tests import size_test
from .core.table import CommunityTable
from .core.transforms import (TRANSFORMS, Chord, Clr, Hellinger, Identity, Log1p, Power,
                              Presence, Profile, Transform, Wisconsin, get_transform)

__version__ = "0.1.0"


def __getattr__(name):
    # figures and the dashboard are imported on first use, so `import tallyform` stays light
    if name == "plots":
        from .render import plots
        return plots
    if name in ("report", "write_outputs"):
        from .render import report as _report
        return getattr(_report, name)
    if name == "explore":
        from .widgets import explore
        return explore
    raise AttributeError(f"module 'tallyform' has no attribute {name!r}")

__all__ = [
    "CommunityTable", "read_counts", "read_samples", "read_long", "read_darwin_core",
    "demo", "demo_names", "simulate_community", "errors", "InputError", "DesignError",
    "TooLargeError", "__version__",
    "AnalysisSpec", "run", "AnalysisResults",
    "size_shape", "SizeShapeResult", "scan", "ScanResult", "compare_choices",
    "ChoiceComparison", "choice_adjusted", "ChoiceAdjustedResult", "audit", "AuditResult",
    "pcoa", "ca", "cca", "rda", "db_rda", "nmds", "Ordination", "constraint_test",
    "ConstraintTest",
    "Dissimilarity", "dissimilarity", "feature_matrix", "MEASURES", "Measure", "get_measure",
    "TRANSFORMS", "Transform", "get_transform", "Identity", "Power", "Log1p", "Presence",
    "Profile", "Hellinger", "Chord", "Wisconsin", "Clr",
    "permanova", "pairwise_permanova", "welch_permanova", "WelchResult", "dispersion_test", "size_test", "compare_groups",
    "taxon_contributions", "TaxonContributions", "explore", "report", "write_outputs",
    "set_memory_limit", "memory_limit", "set_progress", "get_progress",
]
__all__ += ["outlier_samples", "OutlierSamples"]
__all__ += ["shape_test", "spread_test", "CountingTestResult", "rarefied_table"]
