"""The fast path: a precomputed melting table per model and parameter set.

A column depends only on (Tp, water, top of melting), and for a given (Tp, water) the melt
thickness, melt fraction and integral of P dF at every top pressure come from one integration
from the onset to the surface. The table stores them on nodes of Tp, water and pressure, plus the
onset pressure on nodes of Tp and water; evaluation is interpolation (bilinear in Tp and pressure,
linear in the water coordinate u = water^0.75, in which the Katz solidus depression is linear
below saturation). Cells outside the table, or next to a node with no onset, are integrated
directly (by :mod:`lidmelt.physics._evaluate`, which turns the interpolated values into outputs
and flags), so results are never clipped. The worst-case error against the direct integration
is measured in tests/test_table.py over the whole supported range.

Tables are cached on disk (``$LIDMELT_CACHE_DIR``, else ``$XDG_CACHE_HOME/lidmelt``, else
``~/.cache/lidmelt``) under a SHA-256 of the model's class, every parameter value and the table
layout, so that changing any parameter builds a new table. Each file also stores the SHA-256 of
its content, checked on load; a damaged file is rebuilt with a one-line warning, and the cache
folder has a size limit with least-recently-used eviction (:mod:`lidmelt.physics._tablecache`).
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import threading
import warnings
from dataclasses import asdict, dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from lidmelt._errors import ModelError
from lidmelt._files import atomic_path
from lidmelt.physics import _tablecache as cache
from lidmelt.physics._column import integrate_columns, onset_pressure_gpa
from lidmelt.physics._melting import MeltingModel, get_model
from lidmelt.physics._tablecache import cache_dir, content_sha256, enforce_limit, touch

#: Changes with the physics a table stores beyond its parameters: 3 = phase boundaries continued
#: with published high-pressure shapes, PREM below 7.25 GPa, the upper mantle's floor; 4 = each
#: column's latent-heat deficit at every node (the geotherm top of melting) as well; 5 = the
#: columns beyond the calibrated pressure on finer water nodes as well (``deep_values``).
TABLE_FORMAT = 5
_ARRAYS = (
    "tp_c", "water_u", "pressure_gpa", "onset_gpa", "values", "deficit_k", "deep_values",
)  # fmt: skip
_NODE_KEYS = ("node_melt_thickness_km", "node_melt_fraction", "node_int_p_df_gpa")
WATER_EXPONENT = 0.75  # the water coordinate u = water^0.75 (Katz et al. 2003 gamma)
# Step of the direct integration for the few cells the table cannot do: 0.04 GPa changes melt
# thickness by < 4e-4 km against 0.0025 GPa (tests/test_column.py::test_step_convergence), far
# inside the table tolerance, and is 4 times faster than the default step.
FALLBACK_STEP_GPA = 0.04


@dataclass(frozen=True)
class TableLayout:
    """Nodes of the table. Temperatures in deg C, water in wt%, pressure in GPa.

    The Tp nodes run to 1900 deg C, the hottest plume mantle lidmelt is tested for (hotspot Tp
    estimates reach about 1800 deg C, Bao et al. 2022, from a news summary only; 1900 deg C
    leaves a margin). The pressure nodes are tops of melting, not onsets: they run to
    ``top_pressure_max_gpa`` = 13.4 GPa, below the upper mantle's floor (13.35 GPa, PREM's 400
    km), the deepest onset (the model's ``max_onset_pressure_gpa``), so that every lid the
    inputs accept (400 km at most) has its nodes; cells with a deeper top (beneath a water load)
    are integrated directly.

    Columns are integrated in steps of ``integration_step_gpa`` at the nodes and of
    ``deep_integration_step_gpa`` below the deepest node, where nothing is recorded; against
    steps of 0.005 GPa both change node values by < 1e-3 km (tests/test_table.py).

    Beyond the calibrated pressure H and F are not linear in the water coordinate between the
    ``water_nodes`` (they erred by up to 8.7 times the table tolerance on hot wet cells), so the
    Tp nodes from one before the first onset beyond it on are also integrated on
    ``deep_water_nodes`` water nodes (``MeltTable.deep_values``): with 41, linear in the water
    coordinate erred by at most 0.21 times the tolerance there away from the jump of the onset
    to the upper mantle's floor and 1.002 next to it, with 81 by 0.78 next to it (hot wet cells,
    tests/test_kernel.py; a choice of accuracy against size: about 170 MB for Katz).
    """

    tp_min_c: float = 1100.0
    tp_max_c: float = 1900.0
    tp_step_k: float = 2.0
    water_max_wt_pct: float = 0.1
    water_nodes: int = 11
    pressure_step_gpa: float = 0.02
    integration_step_gpa: float = 0.02
    top_pressure_max_gpa: float = 13.4
    deep_integration_step_gpa: float = 0.1
    deep_water_nodes: int = 81


def table_key(model: MeltingModel, layout: TableLayout) -> str:
    """SHA-256 of the model class, every parameter and the layout (the cache key)."""
    doc = {
        "format": TABLE_FORMAT,
        "class": type(model).__name__,
        "parameters": model.parameters(),
        "layout": asdict(layout),
    }
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()


class MeltTable:
    """Tabulated melting columns of one model.

    Evaluate it with ``lidmelt.physics.melt_column(..., table=table)``; build one with
    :func:`get_table`.

    Parameters
    ----------
    model : MeltingModel
        The melting model the columns were integrated with.
    layout : TableLayout
        The nodes of the table: potential temperature, water and top-of-melting pressure.
    arrays : dict of str to numpy.ndarray
        The tabulated outputs on those nodes, by name.
    """

    def __init__(self, model: MeltingModel, layout: TableLayout, arrays: dict[str, np.ndarray]):
        self.model = model
        self.layout = layout
        self.tp_c = arrays["tp_c"]
        self.water_u = arrays["water_u"]
        self.pressure_gpa = arrays["pressure_gpa"]
        self.onset_gpa = arrays["onset_gpa"]  # (n_tp, n_water)
        self.values = arrays["values"]  # (n_tp, n_water, n_p, 3): H km, F, int P dF
        # (n_tp, n_water, n_p): the column's temperature below its solid isentrope [K]
        self.deficit_k = arrays["deficit_k"]
        # (n_deep, deep_water_nodes, n_p, 3): the columns of the last n_deep Tp nodes on the
        # finer water nodes (:class:`TableLayout`); empty for an anhydrous model
        self.deep_values = arrays["deep_values"]
        self._slices: dict[float, np.ndarray] = {}
        #: the cache file holding exactly these arrays (set when loaded from or saved to it)
        self.file: TableFile | None = None

    # -- building --------------------------------------------------------------------------------
    @classmethod
    def build(cls, model: MeltingModel, layout: TableLayout = TableLayout()) -> MeltTable:
        """Integrate every (Tp, water) node column from its onset to the surface."""
        if not model.hydrous:
            layout = TableLayout(**{**asdict(layout), "water_max_wt_pct": 0.0, "water_nodes": 1})
        n_tp = round((layout.tp_max_c - layout.tp_min_c) / layout.tp_step_k) + 1
        tp = layout.tp_min_c + layout.tp_step_k * np.arange(n_tp)
        water_u = np.linspace(0.0, layout.water_max_wt_pct**WATER_EXPONENT, layout.water_nodes)
        water = water_u ** (1.0 / WATER_EXPONENT)
        p_max = layout.top_pressure_max_gpa
        ratio = round(layout.pressure_step_gpa / layout.integration_step_gpa)
        n_p = int(np.floor(p_max / layout.pressure_step_gpa + 1e-9)) + 1
        pressure = layout.pressure_step_gpa * np.arange(n_p)
        tt, ww = np.meshgrid(tp, water, indexing="ij")
        onset = onset_pressure_gpa(model, tt, ww)
        values, rec = _node_columns(model, layout, tt.ravel(), ww.ravel(), onset.ravel(), n_p)
        values = values.reshape(n_tp, layout.water_nodes, n_p, 3)
        deficit = _deficit_k(model, tt.ravel(), onset.ravel(), pressure, rec, ratio)
        deficit = deficit.reshape(n_tp, layout.water_nodes, n_p)
        deficit[~np.isfinite(onset)] = np.nan
        arrays = {
            "tp_c": tp,
            "water_u": water_u,
            "pressure_gpa": pressure,
            "onset_gpa": onset,
            "values": values,
            "deficit_k": deficit,
            "deep_values": _deep_values(model, layout, tp, onset, n_p),
        }
        return cls(model, layout, arrays)

    def save(self, path: Path) -> None:
        """Write the table as .npz, atomically (:func:`lidmelt._files.atomic_path`)."""
        with atomic_path(path) as tmp, tmp.open("wb") as fh:
            digest = content_sha256(self.arrays())
            np.savez(
                fh,
                tp_c=self.tp_c,
                water_u=self.water_u,
                pressure_gpa=self.pressure_gpa,
                onset_gpa=self.onset_gpa,
                values=self.values,
                deficit_k=self.deficit_k,
                deep_values=self.deep_values,
                key=np.array(table_key(self.model, self.layout)),
                content_sha256=np.array(digest),
            )
        with path.open("rb") as fh:
            stamp = cache.file_stamp(fh.fileno())
        self.file = TableFile(str(path), self.model, self.layout, digest, stamp)

    def arrays(self) -> dict[str, np.ndarray]:
        """The table's arrays by name (what is saved and checksummed)."""
        return {k: getattr(self, k) for k in _ARRAYS}

    @classmethod
    def load(cls, path: Path, model: MeltingModel, layout: TableLayout) -> MeltTable | None:
        """Read a cached table; None if missing or made for other parameters.

        A file that cannot be read, or whose content differs from its recorded SHA-256, is
        not trusted: a one-line warning, and None (the caller rebuilds it).
        """
        if not path.is_file():
            return None
        try:
            with path.open("rb") as fh, np.load(fh, allow_pickle=False) as data:
                stamp = cache.file_stamp(fh.fileno())
                if str(data["key"]) != table_key(model, layout):
                    return None
                arrays = {k: data[k] for k in _ARRAYS}
                recorded = str(data["content_sha256"])
        except Exception as exc:  # an untrusted file (zip, npy or key damaged): rebuild it
            why = f"cannot be read ({type(exc).__name__}: {exc})"
        else:
            if recorded == content_sha256(arrays):
                touch(path)
                table = cls(model, layout, arrays)
                table.file = TableFile(str(path), model, layout, recorded, stamp)
                return table
            why = "does not match its recorded SHA-256"
        warnings.warn(f"melting table cache file {str(path)!r} {why}; rebuilt.", stacklevel=2)
        return None

    # -- evaluation ------------------------------------------------------------------------------
    def _rough_intervals(self, onset: np.ndarray) -> np.ndarray:
        """Tp intervals (axis 0) where linear interpolation of the onset is not accurate.

        Linear interpolation errs by about h^2 |P0''| / 8; intervals where the second difference
        of the onset says that exceeds 0.02 km, or that touch a node without an onset (near the
        tangency of isentrope and solidus, where the Katz et al. 2003 solidus quadratic turns
        over), are integrated directly instead.
        """
        km = float(self.model.depth_km(1.0))
        second = np.full(onset.shape, np.inf)
        if onset.shape[0] > 2:
            second[1:-1] = np.abs(onset[:-2] - 2 * onset[1:-1] + onset[2:]) / 8.0 * km
            second[0], second[-1] = second[1], second[-2]
        bad = ~np.isfinite(second) | (second > 0.02)
        out = bad[:-1] | bad[1:]
        out[:-1] |= bad[2:]
        out[1:] |= bad[:-2]
        return out

    @property
    def rough(self) -> np.ndarray:
        """(n_tp - 1, max(n_water - 1, 1)) table cells integrated directly (see above)."""
        if not hasattr(self, "_rough"):
            on = self.onset_gpa
            along_tp = self._rough_intervals(on)
            if on.shape[1] == 1:
                self._rough = along_tp
            else:
                no_onset = ~np.isfinite(on)
                near_w = no_onset[:, :-1] | no_onset[:, 1:]
                rough = along_tp[:, :-1] | along_tp[:, 1:] | near_w[:-1] | near_w[1:]
                deep = self.beyond_intervals(on)
                self._rough = rough | deep[:, :-1] | deep[:, 1:]
        return self._rough

    def beyond_intervals(self, onset: np.ndarray) -> np.ndarray:
        """Tp intervals (axis 0) with an onset beyond the calibrated pressure at either node.

        There, near the tangency of the isentrope and the flattening continued solidus, H and F
        are not linear in the water coordinate between water nodes (they erred by up to 3 times
        the table tolerance), so cells between water nodes are integrated directly.
        """
        with np.errstate(invalid="ignore"):
            deep = onset > self.model.calibrated_max_pressure_gpa
        return deep[:-1] | deep[1:]

    def rough_at(self, water: float) -> np.ndarray:
        """(n_tp - 1,) Tp intervals integrated directly at one water content (see above)."""
        return self._rough_intervals(onset_pressure_gpa(self.model, self.tp_c, float(water)))

    def deep_columns(self, water: float) -> tuple[int, np.ndarray]:
        """(i0, (n_tp - i0, n_p, 3) float32): for a water content between water nodes, the
        columns of the Tp nodes from i0 on (one node before the first onset beyond the calibrated
        pressure) integrated at exactly this water, as :meth:`build` does; there H and F are
        not linear in the water coordinate (:meth:`beyond_intervals`). (n_tp, empty) otherwise.
        """
        key = float(water)
        cache = self.__dict__.setdefault("_deep", {})
        if key not in cache:
            lay, n_tp, n_p = self.layout, self.tp_c.size, self.pressure_gpa.size
            c = float(np.ravel(self.water_index(np.array([key]))[1])[0])
            onset = onset_pressure_gpa(self.model, self.tp_c, key)
            with np.errstate(invalid="ignore"):
                deep = np.flatnonzero(onset > self.model.calibrated_max_pressure_gpa)
            res = (n_tp, np.zeros((0, n_p, 3), np.float32))
            if 0.0 < c < 1.0 and self.water_u.size > 1 and deep.size:
                i0 = min(max(int(deep[0]) - 1, 0), n_tp - 2)
                tp = self.tp_c[i0:]
                vals, _ = _node_columns(self.model, lay, tp, np.full(tp.size, key), onset[i0:], n_p)
                res = (i0, vals)
            if len(cache) > 16:
                cache.clear()
            cache[key] = res
        return cache[key]

    def water_index(self, water):
        """Lower water node index and the fraction towards the next node (water coordinate)."""
        if self.water_u.size == 1:
            return np.zeros(np.shape(water), np.intp), np.zeros(np.shape(water))
        u = np.maximum(water, 0.0) ** WATER_EXPONENT / (self.water_u[1] - self.water_u[0])
        j = np.clip(u.astype(np.intp), 0, self.water_u.size - 2)
        return j, u - j

    def water_slice(self, water: float) -> tuple[np.ndarray, float]:
        """The table at one water content, packed for one gather per cell.

        Row i * (n_p - 1) + k holds the 4 corners (i, k), (i, k + 1), (i + 1, k), (i + 1, k + 1)
        of (H, F, integral P dF, onset), 16 float32 values. H, F and P dF are linear in the water
        coordinate between nodes, except the columns beyond the calibrated pressure
        (:meth:`deep_columns`); the onsets are exact at this water (searched at every Tp node).
        Rough intervals get NaN onsets, which sends their cells to direct integration. Also
        returns the Tp from which on no cell has an onset.
        """
        key = float(water)
        if key not in self._slices:
            j, a = (
                int(v) if n == 0 else float(v)
                for n, v in enumerate(self.water_index(np.array(key)))
            )
            j1 = min(j + 1, self.water_u.size - 1)
            vals = (1 - a) * self.values[:, j] + a * self.values[:, j1]
            i0, exact = self.deep_columns(key)
            vals[i0:] = exact  # beyond the calibrated pressure: integrated at this water
            onset = onset_pressure_gpa(self.model, self.tp_c, key)
            rough = self.rough_at(key)
            n_p = self.pressure_gpa.size
            v = np.concatenate([vals, np.repeat(onset[:, None, None], n_p, axis=1)], axis=2)
            packed = np.concatenate([v[:-1, :-1], v[:-1, 1:], v[1:, :-1], v[1:, 1:]], axis=2)
            packed[rough, :, 3::4] = np.nan
            # an isentrope hotter than one that never meets the solidus never meets it either,
            # so from the first node without an onset on, cells have none (exact, not rough)
            finite = np.isfinite(onset)
            last = int(np.flatnonzero(finite)[-1]) if finite.any() else -1
            no_onset_from = (
                self.tp_c[last + 1]
                if last + 1 < onset.size and not finite[last + 1 :].any()
                else np.inf
            )
            if len(self._slices) > 16:
                self._slices.clear()
            self._slices[key] = (
                np.ascontiguousarray(packed.reshape(-1, 16), dtype=np.float32),
                float(no_onset_from),
            )
        return self._slices[key]

    @property
    def top_pressure_max_gpa(self) -> float:
        """The deepest top of melting [GPa] on the table's pressure nodes."""
        return float(self.pressure_gpa[-1])

    def in_range(self, tp, water):
        """Where (Tp, water) lie inside the table's nodes."""
        lay = self.layout
        with np.errstate(invalid="ignore"):
            return (
                (tp >= lay.tp_min_c)
                & (tp <= lay.tp_max_c)
                & (water >= 0)
                & (water <= lay.water_max_wt_pct)
            )


@dataclass(frozen=True)
class TableFile:
    """A melting table named by its cache file: what a dask.distributed cluster's workers get
    in place of the table when each of them can read the file (a few hundred bytes, not the
    table's 220 MB sent to every worker; :func:`lidmelt._cluster.share`).

    The run's process checked the file's content against ``content_sha256`` as it read it
    (:meth:`MeltTable.load`) and noted the file's ``stamp`` (inode and size,
    :func:`lidmelt.physics._tablecache.file_stamp`); a worker maps the file into memory
    (:func:`lidmelt.physics._tablecache.map_npz`: workers on one machine share one copy) and
    takes it only if it is that same file holding that same recorded SHA-256, so it computes
    with exactly the run's table, or not at all.
    """

    path: str
    model: MeltingModel
    layout: TableLayout
    content_sha256: str
    stamp: tuple[int, int]

    def load(self) -> MeltTable:
        """The table, mapped once per process (kept for later chunks and runs of the process).

        Raises
        ------
        ModelError
            If the file is gone or is no longer the run's table (the cache was cleared or the
            table rebuilt while the run went on).
        """
        with _FROM_FILE_LOCK:  # waits for a mapping in progress (read_table_file)
            found = _FROM_FILE.get(self)
        if found is None:
            found = read_table_file(self.path, self.model, self.layout)
            if found is None or found.file != self:
                msg = (
                    f"the melting table file {self.path!r} is gone or is no longer the run's "
                    "table (the table cache was cleared or the table rebuilt during the run); "
                    f"expected content SHA-256 {self.content_sha256[:16]}.... Run again."
                )
                raise ModelError(msg)
        return found


#: Tables mapped from cache files in this process (a cluster's worker), by their
#: :class:`TableFile`: :func:`read_table_file` and :meth:`TableFile.load`; the last few kept.
_FROM_FILE: dict[TableFile, MeltTable] = {}
_FROM_FILE_LOCK = threading.Lock()


def read_table_file(path: str, model: MeltingModel, layout: TableLayout) -> MeltTable | None:
    """The table in the cache file ``path``, mapped into memory (None if it is missing,
    damaged or made for other parameters: never rebuilt here), kept for
    :meth:`TableFile.load` in this process, which takes it only for the file the run's
    process checked. One file is mapped at a time."""
    with _FROM_FILE_LOCK:
        try:
            arrays, stamp = cache.map_npz(Path(path))
            if str(arrays["key"]) != table_key(model, layout):
                return None
            table = MeltTable(model, layout, {k: arrays[k] for k in _ARRAYS})
        except (OSError, ValueError, KeyError):
            return None
        table.file = TableFile(path, model, layout, str(arrays["content_sha256"]), stamp)
        _FROM_FILE[table.file] = table
        while len(_FROM_FILE) > 4:
            del _FROM_FILE[next(iter(_FROM_FILE))]
    return table


def _node_columns(model, layout, tp, water, onset, n_p):
    """((n, n_p, 3) float32 H, F and integral of P dF at the pressure nodes of columns (Tp,
    water, onset), NaN without an onset; the integration's record) by one integration each."""
    ratio = round(layout.pressure_step_gpa / layout.integration_step_gpa)
    rec = integrate_columns(
        model, tp, water, onset, 0.0, step_gpa=layout.integration_step_gpa,
        record_nodes=(n_p - 1) * ratio + 1, deep_step_gpa=layout.deep_integration_step_gpa,
    )  # fmt: skip
    vals = np.stack([rec[k][:, ::ratio] for k in _NODE_KEYS], axis=-1).astype(np.float32)
    vals[~np.isfinite(onset)] = np.nan
    return vals, rec


def _deep_values(model, layout, tp, onset, n_p):
    """(n_deep, deep_water_nodes, n_p, 3) float32: the columns of the Tp nodes from one before
    the first onset beyond the calibrated pressure (at any water node) on, on the finer water
    nodes (:class:`TableLayout`); empty where the model is anhydrous or no onset is that deep.
    """
    n_w = layout.deep_water_nodes
    with np.errstate(invalid="ignore"):
        deep = np.flatnonzero((onset > model.calibrated_max_pressure_gpa).any(axis=1))
    if not model.hydrous or n_w < 2 or deep.size == 0 or layout.water_max_wt_pct <= 0:
        return np.zeros((0, max(n_w, 1), n_p, 3), np.float32)
    i0 = min(max(int(deep[0]) - 1, 0), tp.size - 2)
    water = np.linspace(0.0, layout.water_max_wt_pct**WATER_EXPONENT, n_w) ** (1.0 / WATER_EXPONENT)
    tt, ww = np.meshgrid(tp[i0:], water, indexing="ij")
    on = onset_pressure_gpa(model, tt, ww)
    vals, _ = _node_columns(model, layout, tt.ravel(), ww.ravel(), on.ravel(), n_p)
    return vals.reshape(tt.shape[0], n_w, n_p, 3)


def _deficit_k(model, tp, onset, pressure, rec, ratio):
    """T_is(P) - T_col(P) [K] of each column at the pressure nodes (float32): how far latent
    heat has cooled the melting column below its solid isentrope T_is; 0 below the onset.

    T_col is the column's temperature path (the solid isentrope below the onset, the isentropic
    melting path above it; :func:`lidmelt.physics._column.integrate_columns`). The deficit, not
    T_col itself, is stored: it is exactly 0 below the onset, so interpolating it between Tp
    nodes does not smear the kink of T_col at the onset (T_is is exact at any Tp).
    """
    t_col = rec["node_temperature_c"][:, ::ratio]
    t_is = model.solid_adiabat_c(tp[:, None], pressure[None, :])
    with np.errstate(invalid="ignore"):
        above = pressure[None, :] < onset[:, None]
    return np.where(above, t_is - t_col, 0.0).astype(np.float32)


def table_path(model: MeltingModel, layout: TableLayout, folder: str | Path) -> Path:
    """The cache file of ``model``'s table with ``layout`` in the cache folder ``folder``."""
    return Path(folder) / f"{model.name}-{table_key(model, layout)[:16]}.npz"


@lru_cache(maxsize=16)
def _cached_table(model: MeltingModel, layout: TableLayout, folder: str) -> MeltTable:
    path = table_path(model, layout, folder)
    table = MeltTable.load(path, model, layout)
    if table is None:
        table = MeltTable.build(model, layout)
        with contextlib.suppress(OSError):  # a read-only cache only costs a rebuild next time
            table.save(path)
            enforce_limit(path.parent, keep=path)
    return table


def get_table(
    model: str | MeltingModel = "katz2003", layout: TableLayout = TableLayout()
) -> MeltTable:
    """The table of ``model``, from memory, the disk cache, or built now (a few seconds).

    Parameters
    ----------
    model : str or MeltingModel
        A registry name or a model object (see :func:`get_model`).
    layout : TableLayout
        The table's nodes; the default is the one every run uses.

    Returns
    -------
    MeltTable
        The table, shared by every caller in this process.
    """
    return _cached_table(get_model(model), layout, str(cache_dir()))
