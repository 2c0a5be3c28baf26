"""Mutation probe: small deliberate bugs, one at a time, and the tests that must catch each.

Each mutation replaces one exact piece of text in one source file (it must occur exactly once)
by a slightly wrong one (a sign, an index, >= for >, a constant), runs the tests named for it
with pytest, and puts the file back byte for byte, also on Ctrl-C or SIGTERM (the original text
is restored in a ``finally``; a SIGTERM is turned into KeyboardInterrupt first). A mutation is
caught when pytest reports a failing test (exit status 1); the table says which.

Before the mutations the named tests run once on the unmodified code: a test that fails there
proves nothing, and the probe stops. Prints a Markdown table: bug, caught or not, by which test.

    .venv/bin/python benchmarks/probe_mutations.py            # every mutation
    .venv/bin/python benchmarks/probe_mutations.py --only tri # those whose name contains "tri"
    .venv/bin/python benchmarks/probe_mutations.py --list     # the mutations, nothing run
    .venv/bin/python benchmarks/probe_mutations.py --only anomaly --tests tests/test_evaluate.py
        # try one mutation against other tests (to find which test catches it)

The source files are edited in place (numba notices the change and recompiles what it must;
the tests build their melting tables in a private folder per session). If the process is
killed with SIGKILL mid-run, ``git diff pipeline/`` shows the one mutation left; ``git checkout``
the file.
"""

from __future__ import annotations

import argparse
import re
import signal
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PKG = "pipeline/lidmelt/"


@dataclass(frozen=True)
class Mutation:
    """One deliberate bug: in ``file`` (relative to the repository), ``old`` becomes ``new``."""

    name: str
    file: str
    old: str
    new: str
    description: str
    tests: tuple[str, ...]


MUTATIONS: tuple[Mutation, ...] = (
    Mutation(
        "STAC shape order",
        PKG + "grids/_stac.py",
        'proj.shape = [int(n) for n in info["shape"]]',
        'proj.shape = [int(n) for n in info["shape"]][::-1]',
        "the Item's proj:shape gives [columns, rows] instead of [rows, columns]",
        ("tests/test_stac.py::test_raster_assets_match_their_geotiff_headers",),
    ),
    Mutation(
        "STAC footprint CRS",
        PKG + "grids/_stac.py",
        '"crs": rasterio.crs.CRS.from_wkt(grid["crs_wkt"]),',
        '"crs": rasterio.crs.CRS.from_epsg(4326),',
        "the footprint is taken as WGS 84 whatever the grid's CRS (no reprojection)",
        ("tests/test_stac.py::test_projected_grid_footprint_is_reprojected_to_wgs84",),
    ),
    Mutation(
        "STAC antimeridian",
        PKG + "grids/_stac.py",
        "    if east <= 180.0:\n        return found",
        "    if east <= 360.0:\n        return found",
        "a footprint in 0-360 longitudes is left past 180 E (not RFC 7946)",
        ("tests/test_stac.py::test_longitudes_past_180_are_wrapped",),
    ),
    Mutation(
        "STAC statistics swapped",
        PKG + "grids/_stac.py",
        'minimum=stats["min"], maximum=stats["max"]',
        'minimum=stats["max"], maximum=stats["min"]',
        "the raster band's minimum and maximum are swapped",
        ("tests/test_stac.py::test_raster_assets_match_their_geotiff_headers",),
    ),
    Mutation(
        "STAC catalogue in the manifest",
        PKG + "grids/_manifest.py",
        "rel not in FIGURE_NAMES | CATALOGUE_NAMES",
        "rel not in FIGURE_NAMES",
        "a resealed run takes its STAC Item into the manifest the Item lists",
        ("tests/test_stac.py::test_a_resealed_run_keeps_the_catalogue_outside_its_manifest",),
    ),
    Mutation(
        "Zarr kernel layer shifted",
        PKG + "grids/_zarr.py",
        "block = next(own) if index is None else stacked[index]",
        "block = next(own) if index is None else stacked[index - 1]",
        "each kernel output of the Zarr store written from the layer before it in the stack",
        ("tests/test_zarr.py::test_store_equals_every_geotiff_bit_for_bit",),
    ),
    Mutation(
        "worker table not checked",
        PKG + "physics/_table.py",
        "if found is None or found.file != self:",
        "if found is None:",
        "a cluster's worker computes with whatever table its cache file now holds",
        ("tests/test_table.py::test_a_table_file_gives_the_same_table_or_refuses",),
    ),
    Mutation(
        "workers sent no table file",
        PKG + "_cluster.py",
        "return ref if readable[ref.path] else table",
        "return ref if not readable[ref.path] else table",
        "workers that can read the table's file get the table, and the others its file name",
        ("tests/test_cluster.py::test_workers_read_the_table_from_its_file_where_they_can",),
    ),
    Mutation(
        "Zarr missing chunk passes",
        PKG + "grids/_zarr.py",
        "if array.nchunks_initialized != array.nchunks:",
        "if array.nchunks_initialized > array.nchunks:",
        "the seal's check of the store lets a missing chunk through",
        ("tests/test_zarr.py::test_a_damaged_store_is_refused",),
    ),
    Mutation(
        "Zarr-only run reads the wrong array",
        PKG + "grids/_rundir.py",
        "da = open_variable(self.store(), name)",
        "da = open_variable(self.store(), self.outputs[0])",
        "a run without GeoTIFFs gives every product the first output's array",
        ("tests/test_zarr.py::test_products_read_a_run_without_geotiffs",),
    ),
    Mutation(
        "URL store kept after a failure",
        PKG + "grids/_transaction.py",
        "for undo in [] if self.committed else reversed(self._on_abort):",
        "for undo in [] if not self.committed else reversed(self._on_abort):",
        "a run that fails after it created its store at [outputs] zarr_url leaves the store",
        ("tests/test_zarr_url.py::test_a_run_failing_during_its_bands_removes_its_store",),
    ),
    Mutation(
        "URL store's bytes unchecked",
        PKG + "grids/_objstore.py",
        "        if want != got:",
        '        if want["chunks"] != got["chunks"]:',
        "a product opens a run whose store at a URL has a chunk of another size than recorded",
        ("tests/test_zarr_url.py::test_a_changed_or_missing_remote_store_is_refused",),
    ),
    Mutation(
        "Zarr flag masks",
        PKG + "_run_store.py",
        'attrs["flag_masks"] = np.array(bits, dtype=np.uint8)',
        'attrs["flag_masks"] = np.array(bits[1:], dtype=np.uint8)',
        "the store's validity flags lose their first CF flag mask",
        ("tests/test_zarr.py::test_store_has_cf_attributes_chunks_and_consolidated_metadata",),
    ),
    Mutation(
        "latent-heat sign",
        PKG + "physics/_column.py",
        "- abar * self.dp_pa + self.ds * (f - self.f0), t1",
        "- abar * self.dp_pa - self.ds * (f - self.f0), t1",
        "the entropy of melting enters the column's entropy balance with the wrong sign",
        ("tests/test_column.py::test_ridge_at_ambient_makes_normal_oceanic_crust",),
    ),
    Mutation(
        "half-space constant",
        PKG + "physics/_cooling.py",
        "scale = 0.5e3 / math.sqrt(model.diffusivity_m2_s * SECONDS_PER_MA)",
        "scale = 1.0e3 / math.sqrt(model.diffusivity_m2_s * SECONDS_PER_MA)",
        "half-space temperature erf(z / sqrt(kappa t)) instead of erf(z / (2 sqrt(kappa t)))",
        ("tests/test_cooling.py::test_half_space_heat_flow_closed_form_and_fouriers_law",),
    ),
    Mutation(
        "water depression sign",
        PKG + "physics/_melting.py",
        "return t - self.water_depression_k_c * np.maximum(x, 0.0)",
        "return t + self.water_depression_k_c * np.maximum(x, 0.0)",
        "water raises the solidus instead of lowering it (Katz et al. 2003 Delta T = K X^gamma)",
        ("tests/test_melting.py::test_katz_wet_solidus_depression",),
    ),
    Mutation(
        "percentile rank",
        PKG + "ensemble/_kernel.py",
        "h = (float(q) / 100.0) * last",
        "h = (float(q) / 100.0) * (last + 1)",
        "percentile rank h = q N / 100 instead of q (N - 1) / 100 (Hyndman & Fan definition 7)",
        ("tests/test_ensemble.py::test_percentiles_interpolate_between_order_statistics",),
    ),
    Mutation(
        "anomaly melt subtraction",
        PKG + "physics/_cells.py",
        "np.maximum(h - h_amb, 0.0)",
        "np.maximum(h - 0.5 * h_amb, 0.0)",
        "the melt the anomaly adds subtracts half the ambient column's melt (numpy path)",
        ("tests/test_evaluate.py::test_anomaly_melt_and_regime",),
    ),
    Mutation(
        "latitude in areas",
        PKG + "grids/_area.py",
        "s = np.sin(np.radians(np.asarray(lat_deg, dtype=np.float64)))",
        "s = np.cos(np.radians(np.asarray(lat_deg, dtype=np.float64)))",
        "the authalic q function takes cos(latitude) for sin(latitude)",
        ("tests/test_grids_area.py::test_rows_against_geod_polygons",),
    ),
    Mutation(
        "sampling indices",
        PKG + "products/_sampling.py",
        "corners = (r0 * w + c0, r0 * w + c1, r1 * w + c0, r1 * w + c1)",
        "corners = (r0 * w + c0, r1 * w + c0, r0 * w + c1, r1 * w + c1)",
        "bilinear sampling pairs the two off-diagonal corners with each other's weights",
        ("tests/test_sites.py::test_bilinear_reproduces_a_linear_field",),
    ),
    Mutation(
        "crust density ratio",
        PKG + "physics/_cells.py",
        "crust_ratio=model.solid_density_kg_m3 / options.crust_density_kg_m3,",
        "crust_ratio=options.crust_density_kg_m3 / model.solid_density_kg_m3,",
        "crustal thickness H rho_c / rho_s instead of H rho_s / rho_c (compiled path)",
        ("tests/test_evaluate.py::test_crust_and_melt_production_follow_their_definitions",),
    ),
    Mutation(
        "solid adiabat constant",
        PKG + "physics/_melting.py",
        "self.solid_expansivity_k / (self.solid_density_kg_m3 * self.specific_heat_j_kg_k) * GPA",
        "self.solid_expansivity_k / (self.solid_density_kg_m3 * self.specific_heat_j_kg_k) * 1e8",
        "the solid isentrope's alpha_s / (rho_s c_p) per GPa taken per 0.1 GPa (a unit constant)",
        ("tests/test_column.py::test_solid_isentrope_gradient",),
    ),
    Mutation(
        "probability >= T as > T",
        PKG + "ensemble/_kernel.py",
        "melts = extracted & (basis >= threshold)",
        "melts = extracted & (basis > threshold)",
        "a member whose melt equals the threshold T does not count as reaching it",
        ("tests/test_ensemble.py::test_zero_spread_equals_the_single_run",),
    ),
    Mutation(
        "one permutation for every key",
        PKG + "ensemble/_sampling.py",
        "    for d in range(dims):\n        strata = rng.permutation(members)\n",
        "    strata = rng.permutation(members)\n    for d in range(dims):\n",
        "the Latin hypercube reuses one stratum order for every key (its columns are correlated)",
        ("tests/test_ensemble.py::test_latin_hypercube_orders_its_columns_independently",),
    ),
    Mutation(
        "triangular branches swapped",
        PKG + "ensemble/_sampling.py",
        "out = np.where(u < cut, left, right)",
        "out = np.where(u < cut, right, left)",
        "the triangular inverse CDF takes the upper branch below the mode's probability",
        ("tests/test_ensemble.py::test_triangular_inverse_cdf_against_its_closed_form",),
    ),
    Mutation(
        "histogram median at the upper edge",
        PKG + "_statistics.py",
        "return _HIST_RANGE[0] + (k + 0.5) * width",
        "return _HIST_RANGE[0] + (k + 1.0) * width",
        "the median of the binned values is the bin's upper edge, not its centre",
        (
            "tests/test_statistics.py::test_histogram_median_is_the_centre_of_the_median_bin",
            "tests/test_statistics.py::test_statistics_from_chunk_records_equal_whole_grid_numpy",
        ),
    ),
    Mutation(
        "histogram percentiles by another definition",
        PKG + "products/_maps/_members.py",
        'value = float(np.percentile(values, float(key[1:]), method="linear"))',
        'value = float(np.percentile(values, float(key[1:]), method="lower"))',
        "the member histogram's percentile lines by the lower order statistic, not definition 7",
        ("tests/test_ensemble_products.py::test_member_histogram_marks_the_percentiles",),
    ),
    Mutation(
        "least added melt >= as >",
        PKG + "_statistics.py",
        "return (anomaly_melt > 0) & (anomaly_melt >= least)",
        "return (anomaly_melt > 0) & (anomaly_melt > least)",
        "a cell whose anomaly melt equals the least amount (0.02 km) is not counted as added melt",
        (
            "tests/test_statistics.py::"
            "test_cells_with_added_melt_leave_out_values_below_the_least_amount",
        ),
    ),
    Mutation(
        "explore cell under the pointer",
        PKG + "products/_maps/_explore_script.py",
        "const c = Math.floor((cx - b.left - tx) / scale), r = Math.floor(",
        "const c = Math.round((cx - b.left - tx) / scale), r = Math.floor(",
        "the map page reads the cell half a cell to the right of the pointer",
        ("tests/test_explore_browser.py",),
    ),
    Mutation(
        "explore readout row",
        PKG + "products/_maps/_explore_script.py",
        "const R = F.offset + cell.row * F.stride,",
        "const R = F.offset + cell.col * F.stride,",
        "the map page names the column's index as the row",
        ("tests/test_explore_browser.py",),
    ),
    Mutation(
        "explore image placement",
        PKG + "products/_maps/_explore_script.py",
        "ctx.drawImage(lay.img, tx, ty, cols * scale, rows * scale);",
        "ctx.drawImage(lay.img, tx + scale, ty, cols * scale, rows * scale);",
        "the map page draws the layer one cell east of where it reads values",
        ("tests/test_explore_browser.py",),
    ),
    Mutation(
        "explore layer switch",
        PKG + "products/_maps/_explore_script.py",
        "active = Math.max(0, D.layers.findIndex((L) => L.name === select.value));",
        "active = Math.max(0, D.layers.findIndex((L) => L.name === select.value) - 1);",
        "the map page's layer switch shows the layer before the chosen one",
        ("tests/test_explore_browser.py",),
    ),
    Mutation(
        "explore value byte order",
        PKG + "products/_maps/_explore_data.py",
        '"values": packed(values.astype("<f4").tobytes()),',
        '"values": packed(values.astype(">f4").tobytes()),',
        "the map page's values embedded big-endian (the browser reads little-endian)",
        ("tests/test_explore.py",),
    ),
    Mutation(
        "explore shown cell",
        PKG + "products/_maps/_explore_data.py",
        "return self.stride // 2",
        "return 0",
        "a large run's page shows the first cell of each block, not its centre",
        ("tests/test_explore.py",),
    ),
    Mutation(
        "explore json escape",
        PKG + "products/_maps/_explore.py",
        "        text = text.replace(char, code)",
        "        text = text.replace(code, char)",
        "the map page's data block keeps raw '<', '>' and '&' (a name could close the script)",
        ("tests/test_explore.py",),
    ),
)


def _on_sigterm(signum, frame):
    raise KeyboardInterrupt


def run_tests(tests: tuple[str, ...], timeout: float) -> tuple[int, list[str], float]:
    """Run ``tests`` with pytest; (exit status, failing node ids, seconds)."""
    cmd = [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "-rfE", "-x"]
    cmd += ["--no-header", *tests]
    start = time.perf_counter()
    try:
        done = subprocess.run(
            cmd, cwd=ROOT, capture_output=True, text=True, timeout=timeout, check=False
        )
    except subprocess.TimeoutExpired:
        return -1, [], time.perf_counter() - start
    failed = re.findall(r"^(?:FAILED|ERROR) (\S+)", done.stdout, flags=re.MULTILINE)
    return done.returncode, failed, time.perf_counter() - start


def apply_and_test(m: Mutation, tests: tuple[str, ...], timeout: float) -> tuple[str, str, float]:
    """Apply ``m``, run ``tests``, restore the file; (outcome, by which test, seconds)."""
    path = ROOT / m.file
    original = path.read_bytes()
    text = original.decode("utf-8")
    count = text.count(m.old)
    if count != 1:
        raise SystemExit(f"{m.name}: the old text occurs {count} times in {m.file} (need 1)")
    try:
        path.write_text(text.replace(m.old, m.new), encoding="utf-8")
        status, failed, seconds = run_tests(tests, timeout)
    finally:
        path.write_bytes(original)
    if status == 1 and failed:
        return "caught", ", ".join(f.split(" - ")[0] for f in failed), seconds
    if status == 0:
        return "NOT caught", "-", seconds
    return f"error (pytest exit {status})", ", ".join(failed) or "-", seconds


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", help="run only the mutations whose name contains this")
    parser.add_argument("--tests", nargs="+", help="run these tests instead of the named ones")
    parser.add_argument("--list", action="store_true", help="list the mutations and stop")
    parser.add_argument("--no-baseline", action="store_true", help="skip the unmutated run")
    parser.add_argument("--timeout", type=float, default=1200.0, help="seconds per pytest run")
    args = parser.parse_args(argv)
    chosen = [m for m in MUTATIONS if not args.only or args.only in m.name]
    if args.list or not chosen:
        for k, m in enumerate(chosen, 1):
            print(f"{k:2d}. {m.name} ({m.file}): {m.description}; tests {', '.join(m.tests)}")
        return 0
    signal.signal(signal.SIGTERM, _on_sigterm)
    for m in chosen:  # every old text must be there before anything is changed
        text = (ROOT / m.file).read_text(encoding="utf-8")
        if text.count(m.old) != 1:
            raise SystemExit(f"{m.name}: the old text occurs {text.count(m.old)} times in {m.file}")
    if not args.no_baseline:
        named = tuple(dict.fromkeys(t for m in chosen for t in (args.tests or m.tests)))
        status, failed, seconds = run_tests(named, args.timeout)
        print(f"baseline (unmutated code, {len(named)} test ids): pytest exit {status}, "
              f"{seconds:.0f} s")  # fmt: skip
        if status != 0:
            print(f"the named tests fail without a mutation: {failed}")
            return 1
    rows = []
    for k, m in enumerate(chosen, 1):
        outcome, by, seconds = apply_and_test(m, tuple(args.tests or m.tests), args.timeout)
        rows.append((k, m, outcome, by, seconds))
        print(f"[{k}/{len(chosen)}] {m.name}: {outcome} ({seconds:.0f} s)", file=sys.stderr)
    print()
    print("| # | bug | file | description | caught | by |")
    print("|---|---|---|---|---|---|")
    for k, m, outcome, by, _ in rows:
        where = m.file.removeprefix(PKG)
        print(f"| {k} | {m.name} | {where} | {m.description} | {outcome} | {by} |")
    missed = sum(1 for r in rows if r[2] != "caught")
    print(f"\n{len(rows) - missed} of {len(rows)} mutations caught.")
    return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main())
