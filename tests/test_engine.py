"""Basin runs end to end: workflow -> aligned inputs -> kernel -> GeoTIFFs and summary.

Grids here are invented test inputs; every check value comes from an independent calculation:
``lidmelt.melt_column`` (direct integration) on the same cell's inputs, the cooling model on the
same age, pyproj's CRS and transform, or an identity (same inputs, same outputs).
"""

import json
import shutil
from pathlib import Path

import numpy as np
import numpy.testing as npt
import pytest
import rasterio
from rasterio.transform import from_origin

from lidmelt._engine import run_basin
from lidmelt._errors import InputError, LidmeltError
from lidmelt._variables import DEFAULT_OUTPUTS, FLAG_VARIABLE, INPUTS, OUTPUTS
from lidmelt.cli import main
from lidmelt.grids._manifest import MANIFEST_KEY, SUMMARY_HASH_KEY, summary_sha256
from lidmelt.grids._rundir import RUN_FORMAT_VERSION, SUMMARY_NAME, open_run, write_summary
from lidmelt.physics import get_cooling_model, get_model, melt_column
from lidmelt.physics._cooling import seafloor_depth_m
from lidmelt.physics._geotherm import direct_excess_k, direct_top_km
from lidmelt.physics._pressure import water_load_km
from lidmelt.workflow import load_workflow

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "workflows" / "demo.toml"


def write_tif(path, values, transform, crs="EPSG:4326", units="Ma"):
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        height=values.shape[0],
        width=values.shape[1],
        count=1,
        dtype="float32",
        crs=crs,
        transform=transform,
        nodata=np.nan,
    ) as dst:
        dst.write(values.astype("float32"), 1)
        dst.units = (units,)
    return path


def small_basin(folder: Path, *, age_name="age.tif", extra="", age=None) -> Path:
    """A 40 x 60 invented basin at 0.25 degree with a NaN margin, and its workflow file."""
    folder.mkdir(parents=True, exist_ok=True)
    lon = -30 + 0.25 * (np.arange(60) + 0.5)
    lat = 10 - 0.25 * (np.arange(40) + 0.5)
    if age is None:
        age = np.broadcast_to(2.0 * (lon - lon[0]) + 0.5, (40, 60)).copy() + 0 * lat[:, None]
        age[:, -6:] = np.nan
    write_tif(folder / age_name, age, from_origin(-30, 10, 0.25, 0.25))
    wf = folder / "basin.toml"
    wf.write_text(
        f"""
[run]
name = "small"
maps = false
report = false
[grid]
like = "plate_age"
[inputs.plate_age]
path = "{age_name}"
[inputs.thermal_anomaly]
[[inputs.thermal_anomaly.plumes]]
longitude = -20.0
latitude = 5.0
radius_km = 300.0
peak_excess_k = 250.0
[inputs.water]
constant = 0.0
[compute]
chunk_size = 512
{extra}
""",
        encoding="utf-8",
    )
    return wf


def with_lid_grid(folder: Path, values: np.ndarray) -> Path:
    """``small_basin`` in ``folder`` with a lid thickness grid (km) besides the plate age."""
    small_basin(folder)
    write_tif(folder / "lid.tif", values, from_origin(-30, 10, 0.25, 0.25), units="km")
    text = (folder / "basin.toml").read_text()
    text = text.replace(
        "[inputs.thermal_anomaly]",
        '[inputs.lid_thickness]\npath = "lid.tif"\n[inputs.thermal_anomaly]',
    )
    (folder / "basin.toml").write_text(text)
    return folder / "basin.toml"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "run"
    cfg = load_workflow(DEMO, output_dir=out)
    return run_basin(cfg, progress=False)


def test_demo_outputs_grid_and_nodata(demo_run):
    run = open_run(demo_run.run_dir)
    assert set(DEFAULT_OUTPUTS) <= set(run.outputs)
    with rasterio.open(ROOT / "grids_demo" / "plate_age_ma.tif") as src:
        crs, transform, age = src.crs, src.transform, src.read(1)
    for name in DEFAULT_OUTPUTS:
        with rasterio.open(run.file(name)) as dst:
            assert dst.crs == crs, name
            assert dst.transform == transform, name
            assert dst.dtypes[0] == "float32"
            assert np.isnan(dst.nodata)
            assert dst.units[0] == OUTPUTS[name].units
            assert dst.descriptions[0] == OUTPUTS[name].long_name
            values = dst.read(1)
            tags = dst.tags()
        assert np.all(np.isnan(values[np.isnan(age)])), name  # land/margin stays nodata
        assert tags["model"] == "katz2003"
        params = json.loads(tags["model_parameters"])
        assert params["cpx_mass_fraction"] == 0.17  # every parameter is named
        assert "plate_age_ma" in json.loads(tags["inputs"])
        assert tags["workflow"] == DEMO.read_text(encoding="utf-8")
    with rasterio.open(demo_run.run_dir / "validity_flag.tif") as dst:
        assert dst.dtypes[0] == "uint8"
        assert dst.nodata == 255
        assert dst.descriptions[0] == FLAG_VARIABLE.long_name  # the registry's name
    assert (demo_run.run_dir / "lidmelt.nc").is_file()


def test_demo_cells_equal_melt_column(demo_run):
    run = open_run(demo_run.run_dir)
    age = run.open("plate_age_ma").values
    anomaly = run.open("thermal_anomaly_k").values
    out = {name: run.open(name).values for name in DEFAULT_OUTPUTS}
    rng = np.random.default_rng(7)
    iy, ix = np.nonzero(np.isfinite(age))
    pick = rng.choice(iy.size, 50, replace=False)
    # half of the sample on melting cells so that melt thickness is really tested
    melt_y, melt_x = np.nonzero(out["melt_thickness_km"] > 0.5)
    pick_m = rng.choice(melt_y.size, 25, replace=False)
    ys = np.concatenate([iy[pick], melt_y[pick_m]])
    xs = np.concatenate([ix[pick], melt_x[pick_m]])
    # the demo's rule is the default geotherm rule: each column's top by direct integration and
    # the exact half-space geotherm (lidmelt.physics._geotherm.direct_top_km, tested against the
    # definition in tests/test_geotherm.py), then the column by direct integration; the water
    # load is the half-space seafloor depth at the age (docs/physics.md, "Depth and pressure";
    # the demo has a plate age and no bathymetry), the geotherm's depths below that seafloor
    tp, cell_age = 1350.0 + anomaly[ys, xs], age[ys, xs]
    half_space = get_cooling_model("half-space")
    load = water_load_km(seafloor_depth_m(cell_age, model=half_space))
    top = direct_top_km(get_model("katz2003"), half_space, tp, 0.0, cell_age, water_load_km=load)
    ref = melt_column(tp, top, 0.0, method="direct", water_load_km=load)
    h = out["melt_thickness_km"][ys, xs]
    tol = np.maximum(0.005 * ref.melt_thickness_km, 0.02)  # the table tolerance
    assert np.all(np.abs(h - ref.melt_thickness_km) <= tol + 1e-5)
    npt.assert_allclose(out["onset_depth_km"][ys, xs], ref.onset_depth_km, atol=0.2)
    npt.assert_allclose(out["melting_top_km"][ys, xs], ref.melting_top_km, atol=0.1)
    npt.assert_allclose(out["max_melt_fraction"][ys, xs], ref.max_melt_fraction, atol=2e-3)
    excess = direct_excess_k(
        get_model("katz2003"), half_space, 0.0, cell_age, ambient_c=1350.0, water_load_km=load
    )
    npt.assert_allclose(out["excess_to_melt_k"][ys, xs], excess, atol=1.5)  # 0.04 GPa steps
    assert "age-depth relation" in run.summary["water_load"]


def test_demo_summary(demo_run):
    s = open_run(demo_run.run_dir).summary
    st = s["statistics"]
    thickness = open_run(demo_run.run_dir).open("melt_thickness_km").values
    assert st["melting_cells"] == int(np.sum(thickness > 0))
    assert st["data_cells"] == int(np.sum(np.isfinite(thickness)))
    npt.assert_allclose(
        st["variables"]["melt_thickness_km"]["max"], np.nanmax(thickness), rtol=1e-6
    )
    # volume = sum of thickness x ellipsoidal cell area (authalic latitude, Snyder 1987 eq. 3-12)
    from lidmelt.grids._area import cell_area_km2
    from lidmelt.grids._grid import Grid

    area = cell_area_km2(Grid.from_dict(s["grid"])).values
    npt.assert_allclose(st["melt_volume_km3"], np.nansum(thickness * area), rtol=1e-5)
    npt.assert_allclose(st["melting_area_km2"], np.sum(area[thickness > 0]), rtol=1e-6)
    assert s["inputs"]["plate_age_ma"]["sha256"]
    assert s["model"]["name"] == "katz2003"
    # the melt the anomaly adds and the regimes (lidmelt definition: docs/physics.md,
    # "Definitions"): sums over the written grids
    run = open_run(demo_run.run_dir)
    anomaly = run.open("anomaly_melt_thickness_km").values
    regime = run.open("melting_regime").values
    npt.assert_allclose(st["anomaly_melt_volume_km3"], np.nansum(anomaly * area), rtol=1e-5)
    for value in (0, 1, 2, 3):  # the registry's classes
        assert st["regime_cells"][str(value)] == int(np.sum(regime == value))
    assert np.all(anomaly[np.isfinite(anomaly)] >= 0)
    assert np.all((anomaly <= thickness + 1e-6)[np.isfinite(thickness)])
    assert "melt_production_km3_yr" not in st  # no upwelling input: nothing of it appears
    # the demo's young ridge flank melts at ambient Tp (regimes 1 and 2), and under the default
    # geotherm rule only where ambient mantle melts beneath the half-space geotherm at that age:
    # the direct path's excess to melt at the oldest such cell is below 0 (within its 1.5 K)
    ambient = (regime == 1) | (regime == 2)
    assert st["ambient_melting"]["cells"] == int(ambient.sum()) > 0
    age = run.open("plate_age_ma").values
    oldest = float(age[ambient].max())
    model, hs = get_model("katz2003"), get_cooling_model("half-space")
    assert direct_excess_k(model, hs, 0.0, oldest, ambient_c=1350.0) < 1.5
    assert direct_excess_k(model, hs, 0.0, oldest + 1.0, ambient_c=1350.0) > 0.0


def test_uniform_column_melt_production_and_crust(tmp_path):
    # lidmelt definition (docs/physics.md, "Definitions"): melt production = W x F(top) and its
    # total is the area integral; crustal thickness = H x rho_s / rho_crust. Uniform inputs make
    # every cell the same column, so the total is W x F_top x area.
    wf = tmp_path / "uniform.toml"
    wf.write_text(
        """
[run]
name = "uniform"
maps = false
report = false
[grid]
extent = [-10.0, -8.0, 0.0, 2.0]
resolution = 0.25
[inputs.lid_thickness]
constant = 20.0
[inputs.thermal_anomaly]
constant = 100.0
[inputs.upwelling]
constant = 40.0
[model]
crust_density_kg_m3 = 2800.0
[outputs]
variables = ["melt_thickness_km", "max_melt_fraction", "crustal_thickness_km",
             "melt_production_mm_yr"]
""",
        encoding="utf-8",
    )
    res = run_basin(load_workflow(wf, output_dir=tmp_path / "run"), progress=False)
    run = open_run(res.run_dir)
    ref = melt_column(1450.0, 20.0, 0.0, method="direct")
    f_top, h = float(ref.max_melt_fraction), float(ref.melt_thickness_km)
    production = run.open("melt_production_mm_yr").values
    npt.assert_allclose(production, 40.0 * f_top, atol=40.0 * 2e-3)  # table tolerance on F
    crust = run.open("crustal_thickness_km").values
    npt.assert_allclose(crust, h * 3300.0 / 2800.0, rtol=0.006)  # table tolerance on H
    from lidmelt.grids._area import cell_area_km2
    from lidmelt.grids._grid import Grid

    area = cell_area_km2(Grid.from_dict(run.summary["grid"])).values.sum()
    st = run.summary["statistics"]
    # km3/yr = mm/yr x 1e-6 km/mm x km2, summed over the cells
    npt.assert_allclose(
        st["melt_production_km3_yr"], 1e-6 * float(production[0, 0]) * area, rtol=1e-5
    )
    npt.assert_allclose(st["melt_production_km3_yr"], 40.0e-6 * f_top * area, rtol=0.01)


def test_listing_melt_production_without_upwelling_is_an_error(tmp_path):
    wf = small_basin(tmp_path, extra='[outputs]\nvariables = ["melt_production_mm_yr"]')
    with pytest.raises(LidmeltError, match="upwelling"):
        load_workflow(wf)


def test_runs_are_deterministic(tmp_path):
    wf = small_basin(tmp_path / "in")
    a = run_basin(load_workflow(wf, output_dir=tmp_path / "a"), progress=False)
    b = run_basin(load_workflow(wf, output_dir=tmp_path / "b"), progress=False)
    for name in DEFAULT_OUTPUTS:
        npt.assert_array_equal(
            open_run(a.run_dir).open(name).values, open_run(b.run_dir).open(name).values
        )


def test_cloud_optimized_layout_is_an_option_with_the_same_values(tmp_path):
    """``[outputs] cloud_optimized`` (default false) gives COG files holding the same cells."""
    plain = small_basin(tmp_path / "plain")
    cog = small_basin(tmp_path / "cog", extra="[outputs]\ncloud_optimized = true")
    a = run_basin(load_workflow(plain, output_dir=tmp_path / "a"), progress=False)
    b = run_basin(load_workflow(cog, output_dir=tmp_path / "b"), progress=False)
    tifs = sorted(p.name for p in a.files if p.suffix == ".tif")
    assert tifs == sorted(p.name for p in b.files if p.suffix == ".tif")
    for name in tifs:
        # the GDAL structure tag LAYOUT=COG marks the Cloud-Optimized layout (GDAL COG driver)
        with rasterio.open(a.run_dir / name) as src_a, rasterio.open(b.run_dir / name) as src_b:
            assert src_a.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") != "COG", name
            assert src_b.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG", name
            assert src_a.block_shapes == src_b.block_shapes == [(512, 512)]
            npt.assert_array_equal(src_a.read(1), src_b.read(1))
            assert src_a.descriptions == src_b.descriptions
            assert src_a.units == src_b.units
    open_run(b.run_dir)  # the manifest of the COG run verifies


def test_alignment_of_other_grids_gives_the_same_outputs(tmp_path):
    # the same smooth age field given at twice the resolution, in EPSG:3857 and in 0..360
    # longitudes, onto the grid of the first: outputs agree within interpolation error
    import pyproj

    def age_of(lon, lat):
        return 20.0 + 1.5 * (lon + 30.0) + 0.5 * (lat - 0.0)

    base = tmp_path / "base"
    lon = -30 + 0.25 * (np.arange(60) + 0.5)
    lat = 10 - 0.25 * (np.arange(40) + 0.5)
    # the isotherm lid: the geotherm rule jumps at its fold (docs/physics.md, "The fold"),
    # where an interpolation error of 0.01 Ma in age turns 0 km of melt into 0.4 km
    wf = small_basin(
        base,
        age=age_of(lon[None, :], lat[:, None]),
        extra='[lithosphere]\ntop_of_melting = "isotherm"',
    )
    ref = run_basin(load_workflow(wf, output_dir=tmp_path / "ref"), progress=False)
    ref_h = open_run(ref.run_dir).open("melt_thickness_km").values
    extent = 'extent = [-30.0, -15.0, 0.0, 10.0]\nresolution = 0.25\ncrs = "EPSG:4326"'

    fine_lon = -32 + 0.125 * (np.arange(160) + 0.5)
    fine_lat = 12 - 0.125 * (np.arange(100) + 0.5)
    variants = {
        "fine": (
            age_of(fine_lon[None, :], fine_lat[:, None]),
            from_origin(-32, 12, 0.125, 0.125),
            "EPSG:4326",
        ),
        "lon360": (
            age_of(fine_lon[None, :], fine_lat[:, None]),
            from_origin(-32 + 360, 12, 0.125, 0.125),
            "EPSG:4326",
        ),
    }
    merc = pyproj.Transformer.from_crs("EPSG:3857", "EPSG:4326", always_xy=True)
    x = -3.6e6 + 10000.0 * (np.arange(200) + 0.5)
    y = 1.4e6 - 10000.0 * (np.arange(170) + 0.5)
    mlon, mlat = merc.transform(*np.meshgrid(x, y))
    variants["mercator"] = (
        age_of(mlon, mlat),
        from_origin(-3.6e6, 1.4e6, 10000.0, 10000.0),
        "EPSG:3857",
    )
    for name, (values, transform, crs) in variants.items():
        folder = tmp_path / name
        folder.mkdir()
        write_tif(folder / "age.tif", values, transform, crs=crs)
        text = (
            wf.read_text()
            .replace('like = "plate_age"', extent)
            .replace('path = "age.tif"', f'path = "{folder / "age.tif"}"')
        )
        (folder / "w.toml").write_text(text)
        res = run_basin(load_workflow(folder / "w.toml", output_dir=folder / "out"), progress=False)
        h = open_run(res.run_dir).open("melt_thickness_km").values
        # a linear age field is interpolated almost exactly; the lid is smooth in age
        npt.assert_allclose(h, ref_h, atol=0.05, err_msg=name)


def test_cli_run_and_bad_inputs(tmp_path, capsys):
    wf = small_basin(tmp_path / "in")
    assert main(["run", str(wf), "-o", str(tmp_path / "ok"), "--quiet"]) == 0
    assert "melt_thickness_km.tif" in capsys.readouterr().out

    def fails(args, message):
        out_dir = tmp_path / f"bad{len(list(tmp_path.iterdir()))}"
        assert main(["run", *args, "-o", str(out_dir), "--quiet"]) == 1
        err = capsys.readouterr().err
        assert message in err, err
        assert "Traceback" not in err
        leftovers = [p for p in out_dir.rglob("*") if p.suffix in (".tif", ".json", ".nc")]
        assert not leftovers, leftovers  # nothing half-written under a final name

    fails([str(tmp_path / "missing.toml")], "missing.toml")
    fails([str(wf), "--set", "model.name=katz2030"], "katz2003")
    fails(
        [str(wf), "--set", "model.ambiant_potential_temperature_c=1400"],
        "ambient_potential_temperature_c",
    )
    # a corrupt GeoTIFF
    bad = small_basin(tmp_path / "corrupt")
    (tmp_path / "corrupt" / "age.tif").write_bytes(b"II*\x00 not really a tiff")
    fails([str(bad)], "age.tif")
    # ages in seconds instead of Ma: values far outside 0 to 400
    sec = small_basin(tmp_path / "seconds")
    age = np.full((40, 60), 50.0 * 3.15576e13)
    write_tif(tmp_path / "seconds" / "age.tif", age, from_origin(-30, 10, 0.25, 0.25))
    fails([str(sec)], "seconds")
    # a negative lid thickness grid
    fails([str(with_lid_grid(tmp_path / "neg", np.full((40, 60), -10.0)))], "lid_thickness_km")
    # a lid grid in metres: 90000 is far above the registry's 400 km; the advice says what to do
    fails(
        [str(with_lid_grid(tmp_path / "metres", np.full((40, 60), 9.0e4)))],
        "metres: divide by 1000",
    )


def test_lid_limit_is_the_registry_one(tmp_path):
    # one limit for the lid thickness: lidmelt._variables (400 km); 450 km is refused, 390 km runs
    assert INPUTS["lid_thickness_km"].valid_range == (0.0, 400.0)
    deep = with_lid_grid(tmp_path / "deep", np.full((40, 60), 450.0))
    with pytest.raises(InputError, match="outside 0 to 400"):
        run_basin(load_workflow(deep, output_dir=tmp_path / "deep_out"), progress=False)
    ok = with_lid_grid(tmp_path / "ok", np.full((40, 60), 390.0))
    res = run_basin(load_workflow(ok, output_dir=tmp_path / "ok_out"), progress=False)
    # the lid grid wins over the age: every cell's lid is 390 km (identity with the input)
    npt.assert_allclose(open_run(res.run_dir).open("melting_top_km").values, 390.0)


def test_write_summary_is_read_back_by_run_dir(tmp_path):
    # the run directory's one writer and its reader agree (identity), and no temporary is left
    doc = {"lidmelt_run": RUN_FORMAT_VERSION, "outputs": {}, "inputs": {}, "value": 1.5}
    assert write_summary(tmp_path, doc) == tmp_path / SUMMARY_NAME
    summary = open_run(tmp_path).summary
    # the writer seals the summary: an (empty) manifest and the summary's own checksum
    assert summary.pop(MANIFEST_KEY) == {"files": {}}
    assert summary.pop(SUMMARY_HASH_KEY) == summary_sha256({**doc, MANIFEST_KEY: {"files": {}}})
    assert summary == doc
    assert [p.name for p in tmp_path.iterdir()] == [SUMMARY_NAME]


def test_no_crs_input_is_a_clear_error(tmp_path, capsys):
    wf = small_basin(tmp_path / "in")
    with rasterio.open(
        tmp_path / "in" / "age.tif",
        "w",
        driver="GTiff",
        height=4,
        width=4,
        count=1,
        dtype="float32",
    ) as dst:
        dst.write(np.ones((4, 4), "float32"), 1)
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]) == 1
    assert "CRS" in capsys.readouterr().err


def test_demo_workflow_runs_from_its_own_folder(tmp_path, monkeypatch):
    # the README's main command runs the demo from the project root; it must also run from a
    # copy of the project (paths in the workflow are relative to the workflow file)
    copy = tmp_path / "proj"
    shutil.copytree(ROOT / "workflows", copy / "workflows")
    shutil.copytree(ROOT / "grids_demo", copy / "grids_demo")
    monkeypatch.chdir(copy)
    cfg = load_workflow(Path("workflows/demo.toml"))
    assert cfg.run.output_dir == copy / "runs" / "demo"


def test_plume_upwelling_gives_melt_production(tmp_path):
    # issue 11: a plume's peak_upwelling_mm_yr spreads with the plume's shape; only then does the
    # run write melt production (lidmelt definition: W x F(top), docs/physics.md)
    wf = small_basin(tmp_path)
    text = wf.read_text().replace(
        "peak_excess_k = 250.0", "peak_excess_k = 250.0\npeak_upwelling_mm_yr = 100.0"
    )
    wf.write_text(text)
    res = run_basin(load_workflow(wf, output_dir=tmp_path / "run"), progress=False)
    run = open_run(res.run_dir)
    production = run.open("melt_production_mm_yr").values
    f_top = run.open("max_melt_fraction").values
    upwelling = run.open("upwelling_mm_yr").values
    assert np.nanmax(upwelling) == pytest.approx(100.0, rel=0.05)  # peak near the centre cell
    npt.assert_allclose(production, upwelling * f_top, rtol=1e-5, atol=1e-6)
    assert run.summary["statistics"]["melt_production_km3_yr"] > 0


def test_demo_screening_finds_the_plumes_not_the_ridge_flank(demo_run):
    # The demo's invented plumes (grids_demo/README.md) make anomaly melt where their centre's
    # anomaly exceeds the excess to melt at the seafloor age beneath them (the definition,
    # docs/physics.md; computed here by direct integration under the demo's default geotherm
    # rule, half-space, dry): Ardent and Brisa by more than 30 K, Corvel and Dunmar not at all,
    # so only the first two are candidates; the young ridge flank melts at ambient Tp only.
    # Check values: the names written in workflows/demo.toml; the anomaly basis is issue 11's
    # definition (docs/physics.md, "anomaly melt thickness").
    from lidmelt.products._sampling import sample_points
    from lidmelt.products._screening import run_plumes, screen

    run = open_run(demo_run.run_dir)
    plumes = run_plumes(run)
    centres, _ = sample_points(
        run, [p["longitude"] for p in plumes], [p["latitude"] for p in plumes], "EPSG:4326",
        method="nearest",
    )  # fmt: skip
    excess = direct_excess_k(
        get_model("katz2003"), get_cooling_model("half-space"), 0.0,
        np.asarray(centres["plate_age_ma"], float), ambient_c=1350.0,
    )  # fmt: skip
    margin = np.asarray(centres["thermal_anomaly_k"], float) - excess
    names = [p["name"] for p in plumes]
    assert [n for n, m in zip(names, margin, strict=True) if m > 30.0] == ["Ardent", "Brisa"]
    assert all(m < 0.0 for n, m in zip(names, margin, strict=True) if n in ("Corvel", "Dunmar"))
    total = screen(demo_run.run_dir, min_melt_thickness_km=1.0, min_area_km2=5000.0, basis="total")
    anomaly = screen(demo_run.run_dir, min_melt_thickness_km=1.0, min_area_km2=5000.0)
    assert list(anomaly["plume"]) == ["Ardent", "Brisa"]
    assert set(anomaly["plume_match"]) == {"centre inside"}
    # each anomaly candidate is one plume's area, far smaller than the total-melt candidate
    # that joins the ridge flank (where ambient mantle melts) with Ardent
    assert anomaly["area_km2"].max() < 0.25 * total["area_km2"].max()


def test_netcdf_flag_variable_follows_cf(demo_run):
    # CF conventions 1.8, section 3.5 "Flags" (from memory): bit flags carry flag_masks and
    # blank-separated flag_meanings; lidmelt's bits are those of lidmelt.physics.FLAG_KEYS.
    import xarray as xr

    from lidmelt.physics._flags import FLAG_KEYS

    with xr.open_dataset(demo_run.run_dir / "lidmelt.nc", mask_and_scale=False) as ds:
        flag = ds["validity_flag"]
        assert flag.dtype == np.uint8
        assert list(flag.attrs["flag_masks"]) == sorted(FLAG_KEYS)
        assert flag.attrs["flag_meanings"].split() == [FLAG_KEYS[b] for b in sorted(FLAG_KEYS)]
        assert int(flag.attrs["_FillValue"]) == 255
        with rasterio.open(demo_run.run_dir / "validity_flag.tif") as src:
            np.testing.assert_array_equal(flag.values, src.read(1))


def test_lid_given_below_sea_level_loses_the_water_depth(tmp_path):
    # A lid base 150 km below sea level lies 150 km minus the water depth below the seafloor;
    # with no bathymetry grid the water depth is the cooling model's seafloor depth at the
    # plate age (lidmelt.physics._cooling.seafloor_depth_m, half-space): an identity check.
    from lidmelt.physics._cooling import get_cooling_model, seafloor_depth_m

    wf = with_lid_grid(tmp_path / "b", np.full((40, 60), 150.0))
    text = wf.read_text().replace('path = "lid.tif"', 'path = "lid.tif"\nreference = "sea_level"')
    wf.write_text(text)
    result = run_basin(load_workflow(wf, output_dir=tmp_path / "out"), progress=False)
    run = open_run(result.run_dir)
    age = run.open("plate_age_ma").values
    lid = run.open("melting_top_km").values
    depth_km = seafloor_depth_m(age, model=get_cooling_model("half-space")) / 1000.0
    ok = np.isfinite(age)
    np.testing.assert_allclose(lid[ok], np.maximum(150.0 - depth_km[ok], 7.0), rtol=1e-5)
    prov = result.summary["inputs"]["lid_thickness_km"]
    assert prov["reference"] == "sea_level"
    assert "age-depth relation of the half-space model" in prov["water_depth"]
