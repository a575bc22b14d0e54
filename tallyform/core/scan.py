"""Scan: the size and shape partition over a grid of transforms x measures."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import InputError
from .cluster_map import cluster_map
from .partition import (FRACTIONS, SHAPE_OPTIONS, SIZE_OPTIONS, cached_shape, check_option,
                        check_count, size_shape_from, prepared_arrays, resampling_units,
                        share_intervals)
from .results import ResultMixin
from .table import as_table
from .progress import reports_progress

__all__ = ["scan", "ScanResult", "DEFAULT_SCAN_MEASURES", "DEFAULT_SCAN_TRANSFORMS"]

DEFAULT_SCAN_MEASURES = ("euclidean", "manhattan", "bray_curtis", "canberra", "chi_square",
                         "hellinger", "chord", "jaccard")
DEFAULT_SCAN_TRANSFORMS = (1.0, 0.5, 0.25, 0.0, "log1p")


@dataclass(frozen=True, eq=False)
class ScanResult(ResultMixin):
    """The size and shape partition over a grid of transforms x measures.

    ``frame`` is tidy: one row per (transform, measure) with the four fractions, the
    negative-eigenvalue share, the shape dimensions and any error for that combination; with
    ``n_boot`` also ``<fraction>_low`` and ``<fraction>_high``, the 95 % interval of every
    share (every cell resampled with the same left-out samples).
    """

    frame: pd.DataFrame
    size: str
    shape: str
    n: int
    results: dict = field(default_factory=dict, repr=False)
    notes: tuple = ()
    n_boot: int = 0

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def pivot(self, value: str = "size_only") -> pd.DataFrame:
        """One value (a fraction or ``negative_share``) as measures x transforms."""
        if value not in self.frame.columns:
            raise InputError(f"`value` must be one of {list(self.frame.columns[2:])}; "
                             f"got {value!r}.")
        out = self.frame.pivot(index="measure", columns="transform", values=value)
        order_m = list(dict.fromkeys(self.frame["measure"]))
        order_t = list(dict.fromkeys(self.frame["transform"]))
        return out.loc[order_m, order_t]

    @property
    def reading(self) -> str:
        """The range of the size-only share over the grid, and where it is smallest."""
        ok = self.frame[self.frame["error"] == ""]
        if ok.empty:
            return "No combination of the grid is defined for these data."
        lo, hi = ok["size_only"].idxmin(), ok["size_only"].idxmax()

        def name(i):
            tr = ok.loc[i, "transform"]
            return (f"{tr} + " if tr not in ("none", "1", "1.0") else "") + ok.loc[i, "measure"]
        return (f"Over {len(ok)} choices, the share of between-sample variation that is size "
                f"alone runs from {100 * ok.loc[lo, 'size_only']:.1f} % ({name(lo)}) to "
                f"{100 * ok.loc[hi, 'size_only']:.1f} % ({name(hi)}). Choosing here looks at no "
                "group labels, so a test run afterwards keeps its level.")

    def _title(self) -> str:
        return f"Size and shape scan (n = {self.n}; size: {self.size}; shape: {self.shape})"

    def _repr_html_(self) -> str:
        import html as _html
        piv = self.pivot("size_only")
        if self.n_boot:
            lo, hi = self.pivot("size_only_low"), self.pivot("size_only_high")
            body = pd.DataFrame(
                [[_interval_text(piv.iat[i, j], lo.iat[i, j], hi.iat[i, j])
                  for j in range(piv.shape[1])] for i in range(piv.shape[0])],
                index=piv.index, columns=piv.columns).to_html()
        else:
            body = piv.to_html(float_format="{:.1%}".format)
        return (f"<div><p><b>{_html.escape(self._title())}</b>: size-only share</p>{body}"
                f"{self._notes_html()}</div>")


def _interval_text(v, lo, hi) -> str:
    if not np.isfinite(v):
        return "n/a"
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return f"{100 * v:.1f} %"
    return f"{100 * v:.1f} % ({100 * lo:.0f} to {100 * hi:.0f})"


def _as_transform_spec(t):
    from .transforms import Power, get_transform
    if isinstance(t, (int, float, np.integer, np.floating)) and not isinstance(t, bool):
        return Power(float(t))
    return get_transform(t)


@reports_progress("Scan", knob="n_boot")
def scan(table, measures=DEFAULT_SCAN_MEASURES, transforms=DEFAULT_SCAN_TRANSFORMS, *,
         size: str = "log_total", shape: str = "chi_square", shape_dims: int | None = None,
         n_boot: int = 0, rng=None, units=None, progress=None, cancel=None) -> ScanResult:
    """The size and shape partition for every (transform, measure) pair of a grid.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    measures : sequence of str
        Measure names (default: 8 common measures).
    transforms : sequence of str, Transform or float
        Transforms; a number ``a`` means ``Power(a)`` (1 = none, 0 = presence).
    size, shape, shape_dims
        As in :func:`size_shape`; the shape coordinates are computed once for the grid
        (except for ``shape='same_measure'``).
    n_boot : int, default 0
        Leave-out replicates for a 95 % interval of every share in every cell (columns
        ``<fraction>_low`` / ``<fraction>_high``); the same left-out samples for every cell.
        See :func:`size_shape`.
    rng : None, int or numpy.random.Generator
    units : str or list of str, optional
        Sampling-unit column(s): replicates leave out whole units.

    With an active Dask client (``dask.distributed``) every cell is one task on its
    workers (:func:`tallyform.core.cluster_map.cluster_map`); the grid is the same as
    without one.

    Returns
    -------
    ScanResult
        A combination that is undefined for the data (e.g. Aitchison with zeros) gets NaN
        fractions and its reason in the ``error`` column; the rest of the grid is computed.
    """
    check_option("size", size, SIZE_OPTIONS)
    check_option("shape", shape, SHAPE_OPTIONS)
    table = as_table(table)
    if isinstance(measures, str):
        measures = [measures]
    if isinstance(transforms, (str, int, float)):
        transforms = [transforms]
    specs = [_as_transform_spec(t) for t in transforms]
    from .measures import MEASURES
    unknown = [m for m in measures if m not in MEASURES]
    if unknown:
        raise InputError(f"unknown measure(s) {unknown}; choose from {sorted(MEASURES)}.")
    n_boot = check_count("n_boot", n_boot)
    kept, unit_name, dd, items = None, None, None, None
    if n_boot:
        from .partition_resample import leave_out_sets
        from .random import as_rng
        codes, unit_name = resampling_units(table, units)
        boot_rng = as_rng(rng).spawn(2)[1]      # the stream size_shape uses for intervals
        kept, dd, items = leave_out_sets(table.n_samples, n_boot, boot_rng, unit_codes=codes)
    cache: dict = {}
    if shape != "same_measure":        # the grid's one set of shape coordinates, made here
        try:
            cached_shape(table, shape, None, None, cache)
        except InputError:
            pass                       # every cell reports the error
    shared = dict(table=table, size=size, shape=shape, shape_dims=shape_dims, cache=cache,
                  kept=kept, dd=dd, items=items, unit_name=unit_name)
    cells = [(tr, m) for tr in specs for m in measures]
    out = cluster_map(_scan_cell, cells, shared=shared, progress=progress, cancel=cancel,
                      what="the scan")
    rows, results, interval_notes = [], {}, []
    for (tr, m), (row, r, more) in zip(cells, out):
        rows.append(row)
        if r is not None:
            results[(tr.name, m)] = r
        interval_notes.extend(more)
    frame = pd.DataFrame(rows)
    failed = frame["error"].astype(bool)
    notes = []
    if failed.any():
        notes.append(f"{int(failed.sum())} combination(s) are undefined for these data and "
                     "are left blank (see the error column).")
    if interval_notes:      # one statement of the method for the grid
        from .partition import interval_note
        notes.append(interval_note(n_boot, unit_name, shape_dims is not None, "each cell's")
                     + " Every cell leaves out the same samples.")
        from .partition import SIZE_FREE_NOTE
        notes.extend(x for x in dict.fromkeys(interval_notes)
                     if not x.startswith("95 % intervals") and x != SIZE_FREE_NOTE)
        if SIZE_FREE_NOTE in interval_notes:
            notes.append("for the size-free measures of the grid: " + SIZE_FREE_NOTE)
    return ScanResult(frame=frame, size=size, shape=shape, n=table.n_samples,
                      results=results, notes=tuple(notes), n_boot=n_boot)


def _scan_cell(item, shared: dict, cancel=None):
    """(row, SizeShapeResult or None, interval notes) of one (transform, measure) cell: a
    task of :func:`tallyform.core.cluster_map.cluster_map` (here or on a worker)."""
    from dataclasses import replace

    from .dissimilarity import dissimilarity
    tr, m = item
    table, size, shape, shape_dims = (shared[k] for k in ("table", "size", "shape",
                                                          "shape_dims"))
    kept = shared["kept"]
    row = {"transform": tr.name, "measure": m}
    try:
        d = dissimilarity(table, m, transform=tr)
        r = size_shape_from(table, d, measure=m, transform=tr, size=size, shape=shape,
                             shape_dims=shape_dims, n_permutations=0, rng=None,
                             progress=None, cancel=None, shape_cache=shared["cache"])
        row.update(r.fractions.to_dict())
        row.update(negative_share=r.negative_share, shape_dims=r.shape_dims,
                   size_free=bool(d.properties.get("size_free", False)), error="")
        more = []
        if kept is not None:
            arrays = prepared_arrays(table, d, measure=m, transform=tr, size=size,
                                     shape=shape)
            ci, more = share_intervals(
                arrays, r, kept, shared["dd"], shared["items"], unit_name=shared["unit_name"],
                fixed=shape_dims is not None, cancel=cancel,
                size_free=bool(d.properties.get("size_free")))
            r = replace(r, fractions_ci=ci, notes=r.notes + tuple(more))
            for f in FRACTIONS:
                row[f"{f}_low"], row[f"{f}_high"] = ci.loc[f, "low"], ci.loc[f, "high"]
        return row, r, list(more)
    except InputError as err:      # undefined for these data: keep the rest of the grid
        row.update({f: np.nan for f in FRACTIONS}, negative_share=np.nan,
                   shape_dims=np.nan, size_free=np.nan, error=str(err))
        if kept is not None:
            row.update({f"{f}_{e}": np.nan for f in FRACTIONS for e in ("low", "high")})
        return row, None, []
