"""tallyform: is the difference between communities one of size, of shape, or both?

``import tallyform as tly`` loads the compute core only; figures (plotly) and the dashboard
(ipywidgets) are imported when first used.
"""
from __future__ import annotations

from . import errors
from .core.errors import DesignError, InputError, TooLargeError
from .core.constrained import ca, cca, db_rda, rda
from .core.dispersion import dispersion_test
from .core.inference import pairwise_permanova, permanova
from .core.io import read_counts, read_darwin_core, read_long, read_samples
from .core.nmds import nmds
from .core.ordination import Ordination, pcoa
from .core.scenarios import demo, demo_names
from .core.simulate import simulate_community
from .core.size_tests import size_test
from .core.table import CommunityTable

__version__ = "0.1.0"

__all__ = [
    "CommunityTable", "read_counts", "read_samples", "read_long", "read_darwin_core",
    "demo", "demo_names", "simulate_community", "errors", "InputError", "DesignError",
    "TooLargeError", "__version__", "pcoa", "ca", "cca", "rda", "db_rda", "nmds", "Ordination",
    "permanova", "pairwise_permanova", "dispersion_test", "size_test",
]
