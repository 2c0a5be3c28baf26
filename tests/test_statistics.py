"""The run's summary statistics from per-chunk records (lidmelt._statistics)."""

from __future__ import annotations

import dask.array as dsa
import numpy as np
import numpy.testing as npt

from lidmelt._statistics import band_parts, summarize_bands
from lidmelt._variables import OUTPUTS

NAMES = list(OUTPUTS)
K = {name: k for k, name in enumerate(NAMES)}
INTEGRALS = ["anomaly_melt_thickness_km"]


def _stacked(rng, shape=(40, 30)):
    """Invented outputs: NaN land, melting and non-melting cells, regimes 0-3, flag last."""
    layers = rng.uniform(0.0, 20.0, (len(NAMES) + 1, *shape)).astype(np.float32)
    layers[K["melt_thickness_km"]][rng.random(shape) < 0.3] = 0.0
    layers[K["melting_regime"]] = rng.integers(0, 4, shape)
    land = rng.random(shape) < 0.25
    layers[: len(NAMES), land] = np.nan
    layers[K["onset_depth_km"]][layers[K["melt_thickness_km"]] == 0] = np.nan  # only melting
    return layers


def _summary(layers, area, age, chunks):
    stacked = dsa.from_array(layers, chunks=(layers.shape[0], *chunks))
    age_d = dsa.from_array(age, chunks=chunks)
    area_arg = area if area.shape[1] == 1 else dsa.from_array(area, chunks=chunks)
    height = layers.shape[1]
    bands = []
    for r in range(0, height, 2 * chunks[0]):
        parts = band_parts(
            slice(r, min(r + 2 * chunks[0], height)), stacked=stacked, area=area_arg,
            age=age_d, out_index=list(range(len(NAMES))), integrals=[K[n] for n in INTEGRALS],
        )  # fmt: skip
        bands.append([p.compute() for p in parts])
    return summarize_bands(bands, names=NAMES, integrals=INTEGRALS)


def test_statistics_from_chunk_records_equal_whole_grid_numpy():
    """Per-chunk records give the whole grid's statistics; check values: numpy on the whole
    invented grid (counts and extremes exact, sums to rounding, histogram medians to half a
    0.5-wide bin: 0.25)."""
    rng = np.random.default_rng(3)
    layers = _stacked(rng)
    rows = rng.uniform(10.0, 20.0, (layers.shape[1], 1))  # km2, equal along a row
    area = np.broadcast_to(rows, layers.shape[1:])
    age = rng.uniform(0.0, 200.0, layers.shape[1:]).astype(np.float32)
    st = _summary(layers, rows, age, chunks=(8, 7))
    thickness, regime = layers[0], layers[K["melting_regime"]]
    # reference values: the definitions in docs/physics.md ("Definitions") over the whole grid
    assert st["melting_cells"] == int(np.sum(thickness > 0))
    assert st["data_cells"] == int(np.sum(np.isfinite(thickness)))
    for v in (0, 1, 2, 3):  # the registry's classes
        assert st["regime_cells"][str(v)] == int(np.sum(regime == v))
    npt.assert_allclose(st["melting_area_km2"], area[thickness > 0].sum(), rtol=1e-12)
    npt.assert_allclose(st["melt_volume_km3"], np.nansum(thickness * area), rtol=1e-12)
    anomaly = layers[K["anomaly_melt_thickness_km"]]
    npt.assert_allclose(st["anomaly_melt_volume_km3"], np.nansum(anomaly * area), rtol=1e-12)
    # ambient = total - anomaly-added (the statistics' definition, docs/physics.md)
    npt.assert_allclose(
        st["ambient_melt_volume_km3"],
        np.nansum(thickness * area) - np.nansum(anomaly * area),
        rtol=1e-12,
    )
    for name in NAMES:
        layer = layers[K[name]]
        got = st["variables"][name]
        assert got["min"] == float(np.nanmin(layer))  # exact: a value of the grid
        assert got["max"] == float(np.nanmax(layer))
        npt.assert_allclose(got["mean"], np.nanmean(layer.astype(np.float64)), rtol=1e-12)
    ambient = (regime == 1) | (regime == 2)  # ambient mantle melts (docs/physics.md)
    assert st["ambient_melting"]["cells"] == int(ambient.sum())
    # the histogram median is the centre of the 0.5-wide bin that holds the lower median (the
    # ceil(N/2)-th smallest value, Hyndman & Fan 1996 definition 1 at 1/2): within a quarter
    # (half a bin) of it
    for got, values in (
        (st["ambient_melting"]["median_top_of_melting_km"], layers[K["melting_top_km"]][ambient]),
        (st["ambient_melting"]["median_plate_age_ma"], age[ambient]),
    ):
        lower_median = np.sort(values)[(values.size - 1) // 2]
        assert abs(got - lower_median) <= 0.25


def test_histogram_median_is_the_centre_of_the_median_bin():
    """Invented values chosen inside bins, away from their centres, so that the bin's centre
    differs from its edges and from the value itself.

    Check values, worked by hand from the definition (the median of values binned 0.5 wide from
    0 is the centre of the bin holding the ceil(N/2)-th smallest value): top of melting
    [0.1, 0.2, 10.1, 10.2, 10.4] km -> 3rd value 10.1 in [10.0, 10.5) -> 10.25; plate age
    [3.3, 3.3, 3.4, 50.0, 60.0] Ma -> 3.4 in [3.0, 3.5) -> 3.25; four tops [1.1, 1.2, 7.3,
    9.9] -> 2nd value 1.2 in [1.0, 1.5) -> 1.25, their ages [3.3, 3.3, 3.4, 50.0] -> 3.3 ->
    3.25."""
    shape = (4, 5)
    for tops, ages, top_median, age_median in (
        ([0.1, 0.2, 10.1, 10.2, 10.4], [3.3, 3.3, 3.4, 50.0, 60.0], 10.25, 3.25),
        ([1.1, 1.2, 7.3, 9.9], [3.3, 3.3, 3.4, 50.0], 1.25, 3.25),
    ):
        layers = np.zeros((len(NAMES) + 1, *shape), np.float32)
        age = np.full(shape, 200.0, np.float32)  # cells where ambient mantle does not melt
        n = len(tops)
        cells = np.unravel_index(np.arange(n) * 3, shape)  # spread over rows (and chunks)
        layers[K["melting_regime"]][cells] = 1  # ambient mantle melts (registry class 1)
        layers[K["melt_thickness_km"]][cells] = 1.0
        layers[K["melting_top_km"]][cells] = tops
        age[cells] = ages
        st = _summary(layers, np.ones((shape[0], 1)), age, chunks=(2, 3))
        assert st["ambient_melting"]["cells"] == n
        assert st["ambient_melting"]["median_top_of_melting_km"] == top_median
        assert st["ambient_melting"]["median_plate_age_ma"] == age_median


def test_row_area_column_gives_the_full_area_grid_results():
    rng = np.random.default_rng(4)
    layers = _stacked(rng, shape=(33, 20))
    rows = rng.uniform(10.0, 20.0, (33, 1))
    age = rng.uniform(0.0, 200.0, (33, 20)).astype(np.float32)
    column = _summary(layers, rows, age, chunks=(8, 6))
    full = _summary(layers, np.broadcast_to(rows, (33, 20)).copy(), age, chunks=(8, 6))
    assert column["variables"] == full["variables"]  # these do not depend on the area
    for key in ("melting_area_km2", "melt_volume_km3", "anomaly_melt_volume_km3"):
        npt.assert_allclose(column[key], full[key], rtol=1e-12)  # same sum, other order


def test_cells_with_added_melt_leave_out_values_below_the_least_amount():
    """Check values: numpy on the invented grid with the registry's least anomaly melt
    (Variable.negligible_below) as the threshold; tails below it count as none, a value equal
    to it (as the outputs hold it, float32) counts (lidmelt._statistics.added_melt: "not below
    the least amount", as the maps draw it)."""
    rng = np.random.default_rng(6)
    layers = _stacked(rng, shape=(24, 18))
    least = OUTPUTS["anomaly_melt_thickness_km"].negligible_below
    anomaly = layers[K["anomaly_melt_thickness_km"]]
    anomaly[::3, ::2] = 0.5 * least  # a tail: drawn and counted as none
    anomaly[1::3, ::2] = 0.0
    anomaly[2::6, 1::4] = 2.0 * least  # just above: counted
    anomaly[5::6, 3::4] = least  # exactly the least amount (its float32 value): not below it
    rows = rng.uniform(10.0, 20.0, (24, 1))
    st = _summary(layers, rows, np.zeros((24, 18), np.float32), chunks=(8, 6))
    added = np.isfinite(anomaly) & (anomaly >= np.float32(least)) & (anomaly > 0)
    assert least > 0.0
    exact = anomaly == np.float32(least)
    assert exact.sum() == 16
    assert np.all(added[exact])  # the definition: only values below the least amount go
    assert st["added_melt_cells"] == int(added.sum())
    assert st["added_melt_cells"] < int(np.sum(anomaly > 0))  # the tails are left out
    area = np.broadcast_to(rows, anomaly.shape)
    npt.assert_allclose(st["added_melt_area_km2"], area[added].sum(), rtol=1e-12)
    # the volumes come anomaly first, then ambient, then the total (summary.json's order)
    keys = [k for k in st if k.endswith("_volume_km3")]
    assert keys == ["anomaly_melt_volume_km3", "ambient_melt_volume_km3", "melt_volume_km3"]


def test_a_variable_without_data_has_none_statistics():
    rng = np.random.default_rng(5)
    layers = _stacked(rng, shape=(16, 16))
    layers[K["excess_to_melt_k"]] = np.nan
    st = _summary(layers, np.ones((16, 1)), np.zeros((16, 16), np.float32), chunks=(8, 8))
    assert st["variables"]["excess_to_melt_k"] == {"min": None, "max": None, "mean": None}
