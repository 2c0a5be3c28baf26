"""The fast table path against the direct integration, and the table cache.

The check values here are the direct integration itself (tests/test_column.py proves it against
published values, identities and an independent solve_ivp solution); the tolerances are the
issue's: 0.5 % or 0.02 km on melt thickness, whichever is larger, and 0.2 km on onset depth.
"""

from pathlib import Path

import numpy as np
import numpy.testing as npt
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lidmelt.physics import column_profile, get_model, get_table, melt_column
from lidmelt.physics._table import FALLBACK_STEP_GPA, MeltTable, TableLayout, table_key
from lidmelt.physics._tablecache import cache_dir


def assert_within_tolerance(direct, table):
    for name in ("melt_thickness_km", "onset_depth_km", "max_melt_fraction", "melting_top_km"):
        a, b = getattr(direct, name), getattr(table, name)
        npt.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=name)
    npt.assert_array_equal(direct.flag, table.flag)
    ok = np.isfinite(direct.melt_thickness_km)
    h_d, h_t = direct.melt_thickness_km[ok], table.melt_thickness_km[ok]
    tol = np.maximum(0.005 * np.abs(h_d), 0.02)
    worst = np.max(np.abs(h_t - h_d) / tol) if ok.any() else 0.0
    assert worst <= 1.0, f"melt thickness error is {worst:.2f} x the tolerance"
    on = np.isfinite(direct.onset_depth_km)
    npt.assert_allclose(table.onset_depth_km[on], direct.onset_depth_km[on], atol=0.2)
    npt.assert_allclose(table.max_melt_fraction[ok], direct.max_melt_fraction[ok], atol=2e-3)
    return worst


@pytest.mark.slow
@pytest.mark.parametrize("water", [0.0, 0.004, 0.01, 0.037, 0.1, "varying"])
def test_worst_case_error_over_the_supported_range(water):
    # the whole supported range: Tp 1200 to 1700 C, lid 0 to 250 km, water 0 to 0.1 wt%
    rng = np.random.default_rng(42)
    n = 800
    tp = np.concatenate([rng.uniform(1200.0, 1700.0, n), np.linspace(1200.0, 1700.0, 60)])
    lid = np.concatenate([rng.uniform(0.0, 250.0, n), rng.uniform(0.0, 250.0, 60)])
    w = rng.uniform(0.0, 0.1, tp.size) if water == "varying" else float(water)
    table = melt_column(tp, lid, w, method="table")
    direct = melt_column(tp, lid, w, method="direct")
    assert_within_tolerance(direct, table)
    assert np.sum(direct.melt_thickness_km > 0) > 100  # the sample really melts


def test_table_equals_direct_near_the_onset_and_at_the_top():
    # where the lid is just above or below the onset, and at lid 0 (top 7 km) and 250 km
    model = get_model("katz2003")
    tp = np.array([1350.0, 1350.0, 1350.0, 1500.0, 1500.0, 1690.0, 1200.0])
    p_on = melt_column(tp, 0.0, method="direct").onset_depth_km
    lid = np.array([p_on[0] - 0.3, p_on[1] + 0.3, 0.0, 250.0, p_on[4] - 1.0, 100.0, 0.0])
    assert_within_tolerance(
        melt_column(tp, lid, method="direct", model=model),
        melt_column(tp, lid, method="table", model=model),
    )


@settings(max_examples=10, deadline=None)
@given(
    st.lists(
        st.tuples(st.floats(1200.0, 1700.0), st.floats(0.0, 250.0), st.floats(0.0, 0.1)),
        min_size=1,
        max_size=8,
    )
)
def test_table_equals_direct_at_random_points(cells):
    tp, lid, w = (np.array(c) for c in zip(*cells, strict=True))
    assert_within_tolerance(
        melt_column(tp, lid, w, method="direct"), melt_column(tp, lid, w, method="table")
    )


def test_table_covers_mckenzie_bickle():
    tp = np.linspace(1250.0, 1600.0, 15)
    lid = np.linspace(0.0, 120.0, 15)
    assert_within_tolerance(
        melt_column(tp, lid, model="mckenzie-bickle1988", method="direct"),
        melt_column(tp, lid, model="mckenzie-bickle1988", method="table"),
    )


def test_outside_the_table_falls_back_to_direct_not_clipping():
    # Tp 1950 C and water 0.15 wt% lie outside the table's nodes (Tp to 1900 C, water to 0.1 wt%),
    # and a 450 km top lies below its deepest top node (13.4 GPa, TableLayout): results must
    # equal direct. (The 450 km top lies below the upper mantle's floor, PREM's 400 km: nothing
    # melts there, docs/physics.md.)
    tp = np.array([1950.0, 1400.0, 1150.0, 1900.0])
    w = np.array([0.0, 0.15, 0.0, 0.0])
    lid = np.array([30.0, 30.0, 30.0, 450.0])
    # the fallback integrates at FALLBACK_STEP_GPA (lidmelt.physics._table): compare with exactly
    # that integration (the step's own error is bounded in tests/test_column.py)
    direct = melt_column(tp, lid, w, method="direct", step_gpa=FALLBACK_STEP_GPA)
    table = melt_column(tp, lid, w, method="table")
    assert np.all(np.isfinite(direct.melt_thickness_km))  # continued boundaries: no holes
    assert direct.melt_thickness_km[3] == 0
    assert direct.melt_thickness_km[0] > 0
    npt.assert_array_equal(direct.flag, table.flag)
    npt.assert_allclose(table.melt_thickness_km, direct.melt_thickness_km, equal_nan=True)


def test_cache_is_keyed_by_parameters(tmp_path, monkeypatch):
    monkeypatch.setenv("LIDMELT_CACHE_DIR", str(tmp_path))
    layout = TableLayout(tp_min_c=1300.0, tp_max_c=1400.0, water_nodes=2, water_max_wt_pct=0.01)
    base = get_model("katz2003")
    variant = get_model("katz2003", cpx_mass_fraction=0.15)
    assert table_key(base, layout) != table_key(variant, layout)
    assert table_key(base, layout) == table_key(get_model("katz2003"), layout)
    t1 = get_table(base, layout)
    files = sorted(p.name for p in cache_dir().glob("*.npz"))
    assert len(files) == 1
    assert table_key(base, layout)[:16] in files[0]
    get_table(variant, layout)
    assert len(list(cache_dir().glob("*.npz"))) == 2
    # a fresh load from disk gives the same arrays
    path = cache_dir() / files[0]
    loaded = MeltTable.load(path, base, layout)
    npt.assert_array_equal(loaded.values, t1.values)
    # a table made for other parameters is never used for these
    assert MeltTable.load(path, variant, layout) is None
    # a damaged cache file is ignored (rebuilt), not trusted
    path.write_bytes(b"not a table")
    assert MeltTable.load(path, base, layout) is None


def test_table_shapes_and_model():
    tp = np.full((3, 4), 1450.0)
    res = melt_column(tp, np.linspace(0, 90, 4), 0.0)
    assert res.melt_thickness_km.shape == (3, 4)
    assert res.model.name == "katz2003"


SMALL = TableLayout(tp_min_c=1300.0, tp_max_c=1400.0, water_nodes=2, water_max_wt_pct=0.01)


def test_tampered_cache_is_rebuilt_with_a_warning(tmp_path, monkeypatch):
    # a cached table whose values were doubled (a tamper the old parameter key let through)
    # fails its content SHA-256 and is rebuilt; the warning is one line naming the file
    monkeypatch.setenv("LIDMELT_CACHE_DIR", str(tmp_path))
    model = get_model("katz2003", beta1=1.4)  # a parameter set no other test caches in memory
    table = get_table(model, SMALL)
    (path,) = cache_dir().glob("*.npz")
    with np.load(path) as data:
        arrays = dict(data)
    arrays["values"] = arrays["values"] * 2
    with path.open("wb") as fh:
        np.savez(fh, **arrays)
    with pytest.warns(UserWarning, match="does not match its recorded SHA-256; rebuilt") as rec:
        assert MeltTable.load(path, model, SMALL) is None
    assert "\n" not in str(rec[0].message)
    path.write_bytes(path.read_bytes()[:1000])  # truncated
    with pytest.warns(UserWarning, match="cannot be read"):
        assert MeltTable.load(path, model, SMALL) is None
    # a fresh build writes a good file again, equal to the first (identity)
    MeltTable.build(model, SMALL).save(path)
    npt.assert_array_equal(MeltTable.load(path, model, SMALL).values, table.values)


def test_cache_size_limit_evicts_the_least_recently_used(tmp_path, monkeypatch, capsys):
    import os

    from lidmelt.cli import main
    from lidmelt.physics._tablecache import enforce_limit

    monkeypatch.setenv("LIDMELT_CACHE_DIR", str(tmp_path))
    for k, size in enumerate((400_000, 300_000, 200_000)):
        f = tmp_path / f"katz2003-{k}.npz"
        f.write_bytes(b"x" * size)
        os.utime(f, (1000 + k, 1000 + k))  # k = 0 least recently used
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", "0.6")
    removed = enforce_limit(tmp_path, keep=tmp_path / "katz2003-2.npz")
    assert [p.name for p in removed] == ["katz2003-0.npz"]  # 900 kB -> 500 kB <= 600 kB
    assert main(["cache", "--info"]) == 0
    out = capsys.readouterr().out
    assert "katz2003-1.npz  0.3 MB" in out
    assert "2 table(s), 0.5 MB of 1 MB" in out
    assert main(["cache", "--clear"]) == 0
    assert list(tmp_path.iterdir()) == []
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", "lots")
    assert main(["cache"]) == 1
    assert "LIDMELT_CACHE_MAX_MB = 'lots'" in capsys.readouterr().err


def test_table_steps_are_converged_including_the_deep_coarse_steps():
    # identity of the integration: the table's steps (integration_step_gpa at the nodes,
    # deep_integration_step_gpa below the deepest top node) give the same node values as steps
    # of 0.005 GPa everywhere, to 5 % of the table tolerance (0.02 km on H). Tp 1750-1900 C puts
    # onsets at the upper mantle's floor (13.35 GPa, docs/physics.md), below the deepest top
    # node of this layout (10 GPa), so the deep steps are taken.
    layout = TableLayout(
        tp_min_c=1750.0, tp_max_c=1900.0, tp_step_k=50.0, water_nodes=2, top_pressure_max_gpa=10.0
    )
    fine = TableLayout(
        **{**layout.__dict__, "integration_step_gpa": 0.005, "deep_integration_step_gpa": 0.005}
    )
    model = get_model("katz2003")
    coarse_t, fine_t = MeltTable.build(model, layout), MeltTable.build(model, fine)
    assert np.nanmax(coarse_t.onset_gpa) > 13.0  # the deep coarse steps are really taken
    npt.assert_allclose(coarse_t.values[..., 0], fine_t.values[..., 0], atol=1e-3)
    npt.assert_allclose(coarse_t.values[..., 1], fine_t.values[..., 1], atol=1e-5)


def test_the_columns_temperature_deficit_is_converged_and_zero_below_the_onset():
    # identity of the integration: the latent-heat deficit T_is - T_col recorded at the nodes
    # (for the geotherm top of melting) is the same with steps of 0.005 GPa to 0.05 K (a top
    # moves by 0.05 K / (10 K/km), 5 m, where the geotherm crosses at its usual 10 K/km against
    # the column's 1-3 K/km [derived]); it is 0 at and below the onset and positive above it
    layout = TableLayout(tp_min_c=1300.0, tp_max_c=1500.0, tp_step_k=50.0, water_nodes=2)
    fine = TableLayout(**{**layout.__dict__, "integration_step_gpa": 0.005})
    model = get_model("katz2003")
    coarse_t, fine_t = MeltTable.build(model, layout), MeltTable.build(model, fine)
    npt.assert_allclose(coarse_t.deficit_k, fine_t.deficit_k, atol=0.05)
    p = coarse_t.pressure_gpa
    below = p[None, None, :] >= coarse_t.onset_gpa[:, :, None]
    assert np.all(coarse_t.deficit_k[below] == 0.0)
    above = ~below & (p[None, None, :] < coarse_t.onset_gpa[:, :, None] - 0.05)
    assert np.all(coarse_t.deficit_k[above] > 0.0)
    # the column of Tp 1350 C (dry): its temperature at the node 0.22 GPa (6.8 km) equals the
    # direct profile's (lidmelt.physics.column_profile, tests/test_column.py) within 0.1 K
    table = get_table(model)
    i = int(np.argmin(np.abs(table.tp_c - 1350.0)))
    k = round(0.22 / table.layout.pressure_step_gpa)
    prof = column_profile(1350.0, float(model.depth_km(0.22)), 0.0, step_gpa=0.005, min_top_km=0.0)
    t_col = model.solid_adiabat_c(1350.0, 0.22) - float(table.deficit_k[i, 0, k])
    assert t_col == pytest.approx(float(prof["temperature_c"][-1]), abs=0.1)


def test_a_table_file_gives_the_same_table_or_refuses(tmp_path, monkeypatch):
    # what a cluster's workers get in place of the table (lidmelt._cluster.share): the file,
    # its content's SHA-256 and stamp; check values: the table itself (identity)
    from dataclasses import replace

    from lidmelt._errors import ModelError
    from lidmelt.physics import _table

    monkeypatch.setenv("LIDMELT_CACHE_DIR", str(tmp_path))
    model = get_model("katz2003", beta1=1.45)  # a parameter set no other test caches in memory
    table = get_table(model, SMALL)
    ref = table.file
    assert ref is not None
    assert ref.path == str(next(cache_dir().glob("*.npz")))
    loaded = ref.load()
    assert loaded is not table
    assert loaded.file == ref
    for name, array in table.arrays().items():
        npt.assert_array_equal(getattr(loaded, name), array, err_msg=name)
        assert not getattr(loaded, name).flags.owndata  # mapped from the file, not copied
    assert ref.load() is loaded  # mapped once per process
    with pytest.raises(ModelError, match="is no longer the run's table"):
        replace(ref, content_sha256="0" * 64).load()  # the file records another content
    MeltTable.build(model, SMALL).save(Path(ref.path))  # rebuilt: the same bytes, a new file
    assert ref.load().file == ref  # the kept mapping still holds the run's file
    _table._FROM_FILE.clear()  # a process that had not mapped it: the file is another now
    with pytest.raises(ModelError, match="is no longer the run's table"):
        ref.load()
    with pytest.raises(ModelError, match="is gone"):
        replace(ref, path=str(tmp_path / "gone.npz")).load()
    assert MeltTable.build(model, SMALL).file is None  # not from a file: sent whole
