"""Real faults during a run: the disk filling up, the process killed, two runs at once, links
planted at temporary names. After each, the destination holds the complete old run (or the
complete new one), no traceback is printed, and the files left are exactly the run's.

The check values are identities: the snapshot (file -> SHA-256) of the old run, the exit codes
lidmelt documents (1 error, 130 SIGINT, 143 SIGTERM, -9 SIGKILL from the OS) and its messages.
The disk-full tests mount a small tmpfs, which needs root (CI runs as root); elsewhere they are
skipped with the reason.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import subprocess
import sys
import uuid
from pathlib import Path

import pytest

import runkit
from lidmelt.grids._rundir import open_run

#: What a run folder's parent may hold after a finished command: the run only.
ONLY_RUN = ["run"]
#: Tally of the faults tried and their outcomes, printed at the end of the session (conftest).
#: Each test fails on its own fault (a traceback or a lost file fails check_outcome).
TALLY = runkit.tally("fault", faults=0, files_lost=0, tracebacks=0, killed=0, ended_first=0)


def check_outcome(dest: Path, old: dict[str, str], proc_err: str) -> str:
    """The destination holds the complete old run or a complete new one; count the result."""
    TALLY["faults"] += 1
    if "Traceback" in proc_err:
        TALLY["tracebacks"] += 1
    assert "Traceback" not in proc_err, proc_err
    now = runkit.snapshot(dest)
    if now == old:
        return "old"
    lost = [name for name in old if name not in now]
    try:
        open_run(dest)  # a complete, verified new run
    except Exception:
        TALLY["files_lost"] += max(1, len(lost))
        raise
    return "new"


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    """The tiny basin's workflow and a finished run of it (kept as the 'old' run)."""
    folder = tmp_path_factory.mktemp("faults")
    wf = runkit.basin(folder / "in")
    out = folder / "ref" / "run"
    done = runkit.lidmelt("run", str(wf), "-o", str(out), "--quiet")
    assert done.returncode == 0, done.stderr
    return wf, out


def fresh_old_run(tiny, parent: Path) -> tuple[Path, dict[str, str]]:
    """A copy of the finished run at ``parent/run``, and its snapshot."""
    _, ref = tiny
    dest = parent / "run"
    shutil.copytree(ref, dest)
    return dest, runkit.snapshot(dest)


# ---- killed at several moments -------------------------------------------------------------------
MOMENTS = {
    "staging created": lambda parent: list(parent.glob(".run.staging-*")),
    "GeoTIFFs being written": lambda parent: runkit.staged(parent, "run", "*.tif*"),
    "NetCDF being written": lambda parent: runkit.staged(parent, "run", "*.nc*"),
    "summary written": lambda parent: runkit.staged(parent, "run", "summary.json"),
    # a run with [outputs] zarr = true: the first chunks of its store are there
    "Zarr store being written": lambda parent: runkit.staged(parent, "run", "lidmelt.zarr/*/c"),
}
#: The moments of every run (the GeoTIFF run's); the store's is tried with a store's run.
RUN_MOMENTS = [m for m in MOMENTS if "Zarr" not in m]
SIGNALS = {
    "SIGKILL": (signal.SIGKILL, -9),
    "SIGTERM": (signal.SIGTERM, 143),
    "SIGINT": (signal.SIGINT, 130),
}


#: Runs started per fault before giving up on catching its moment (a run can end first).
ATTEMPTS = 4


def signal_at(wf: Path, dest: Path, parent: Path, moment: str, sig) -> tuple[bool, int, str]:
    """Start a run into ``dest``, send ``sig`` when ``moment`` is seen; (sent while the run
    was alive and before it was seen to end, exit code, stderr)."""
    proc = runkit.start(
        "run",
        str(wf),
        "-o",
        str(dest),
        "--quiet",
        "--set",
        "model.ambient_potential_temperature_c=1360",
    )
    seen = runkit.wait_for(lambda: bool(MOMENTS[moment](parent)) or proc.poll() is not None)
    sent = seen and proc.poll() is None and bool(MOMENTS[moment](parent))
    if sent:
        proc.send_signal(sig)
    _, err = proc.communicate(timeout=120)
    return sent, proc.returncode, err


def kill_at(tiny, parent: Path, moment: str, sig_name: str) -> None:
    """Kill a run at ``moment`` and check what it leaves. The signal must land: a run that
    ended before its moment was caught (exit 0, a complete new run) is checked and tried again,
    and the test fails if no attempt was killed (it never passes without a signal)."""
    wf, _ = tiny
    dest, old = fresh_old_run(tiny, parent)
    sig, code = SIGNALS[sig_name]
    for _ in range(ATTEMPTS):
        sent, returncode, err = signal_at(wf, dest, parent, moment, sig)
        outcome = check_outcome(dest, old, err)
        if returncode == code:
            assert sent, err  # the exit status is the signal's: it was sent, and landed
            TALLY["killed"] += 1
            break
        TALLY["ended_first"] += 1
        # the run ended before the signal (or the signal came too late to matter)
        assert returncode == 0, err
        assert outcome == "new"
        assert sorted(p.name for p in parent.iterdir()) == ONLY_RUN
        shutil.rmtree(dest)
        dest, old = fresh_old_run(tiny, parent)
    else:
        pytest.fail(
            f"no run was killed at {moment!r} in {ATTEMPTS} attempts: the signal never landed"
        )
    if moment == "summary written":
        # the signal may land while the finished run is being swapped into place: the swap is
        # held until it is done, so the destination holds the complete new run (checked by
        # check_outcome) and the run still ends as the signal asks
        assert outcome in ("old", "new")
    else:
        assert outcome == "old"
    if sig_name == "SIGKILL":  # no clean-up possible: the next run (or --clean) removes it all
        assert err == ""
        left = runkit.snapshot(dest)  # the complete run check_outcome found
        cleaned = runkit.lidmelt("run", str(wf), "-o", str(dest), "--clean")
        assert cleaned.returncode == 0, cleaned.stderr
        assert runkit.snapshot(dest) == left
    else:
        word = "terminated (SIGTERM)" if sig_name == "SIGTERM" else "interrupted"
        assert err.strip().splitlines()[-1] == (
            f"lidmelt run: {word}; nothing half-written was left."
        )
    assert sorted(p.name for p in parent.iterdir()) == ONLY_RUN


def test_sigint_while_writing_keeps_the_old_run(tiny, tmp_path):
    kill_at(tiny, tmp_path, "GeoTIFFs being written", "SIGINT")


@pytest.mark.slow
@pytest.mark.parametrize("moment", RUN_MOMENTS)
@pytest.mark.parametrize("sig_name", list(SIGNALS))
def test_killed_run_keeps_the_old_run(tiny, tmp_path, moment, sig_name):
    kill_at(tiny, tmp_path, moment, sig_name)


@pytest.fixture(scope="module")
def tiny_zarr(tmp_path_factory):
    """The tiny basin writing its Zarr store too, and a finished run of it (the 'old' run)."""
    folder = tmp_path_factory.mktemp("faults_zarr")
    wf = runkit.basin(folder / "in", extra="[outputs]\nzarr = true\n")
    out = folder / "ref" / "run"
    done = runkit.lidmelt("run", str(wf), "-o", str(out), "--quiet")
    assert done.returncode == 0, done.stderr
    assert (out / "lidmelt.zarr" / "zarr.json").is_file()
    return wf, out


@pytest.mark.slow
@pytest.mark.parametrize(
    ("moment", "sig_name"),
    [
        *(("Zarr store being written", s) for s in SIGNALS),
        ("staging created", "SIGKILL"),
        ("summary written", "SIGINT"),
    ],
)
def test_killed_zarr_run_keeps_the_old_run(tiny_zarr, tmp_path, moment, sig_name):
    kill_at(tiny_zarr, tmp_path, moment, sig_name)


# ---- two runs at once ----------------------------------------------------------------------------
@pytest.mark.slow
@pytest.mark.parametrize("wait", [False, True])
def test_two_runs_racing_into_one_folder(tiny, tmp_path, wait):
    wf, _ = tiny
    dest, old = fresh_old_run(tiny, tmp_path)
    extra = ["--wait"] if wait else []
    procs = [
        runkit.start(
            "run",
            str(wf),
            "-o",
            str(dest),
            "--quiet",
            *extra,
            "--set",
            f"model.ambient_potential_temperature_c={tp}",
        )
        for tp in (1355, 1365)
    ]
    results = [(p.wait(timeout=300), p.communicate()[1]) for p in procs]
    codes = sorted(code for code, _ in results)
    for _, err in results:
        check_outcome(dest, old, err)
    if wait:
        assert codes == [0, 0]
    else:
        assert codes in ([0, 0], [0, 1])  # [0, 0]: the second started after the first ended
        if codes == [0, 1]:
            err = next(e for c, e in results if c == 1)
            assert "another lidmelt run (process" in err
            assert "--wait" in err
    tp = open_run(dest).summary["ambient_potential_temperature_c"]
    assert tp in (1355.0, 1365.0)
    assert sorted(p.name for p in tmp_path.iterdir()) == ONLY_RUN


# ---- links planted at the old predictable temporary names ----------------------------------------
def test_links_planted_at_temporary_names_are_not_followed(tiny, tmp_path):
    wf, _ = tiny
    dest, _ = fresh_old_run(tiny, tmp_path)
    victim = tmp_path.parent / f"{tmp_path.name}-victim.txt"
    victim.write_text("precious")
    planted = [
        dest / ".summary.json.tmp",
        dest / ".melt_thickness_km.tif.partial-1",
        tmp_path / ".run.staging",
        dest / "summary.json.tmp",
    ]
    for link in planted:
        link.symlink_to(victim)
    done = runkit.lidmelt("run", str(wf), "-o", str(dest), "--quiet")
    assert done.returncode == 0, done.stderr
    assert victim.read_text() == "precious"
    open_run(dest)
    # the links beside the run are another user's business; inside it, the new run replaced them
    assert sorted(p.name for p in tmp_path.iterdir()) == [".run.staging", "run"]
    assert not any(p.is_symlink() for p in dest.rglob("*"))


# ---- the disk filling up -------------------------------------------------------------------------
@contextlib.contextmanager
def small_tmpfs(folder: Path, size_kb: int):
    if os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root (CI runs as root)")
    folder.mkdir(parents=True)
    mounted = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", f"size={size_kb}k", "tmpfs", str(folder)],
        capture_output=True,
        text=True,
        check=False,
    )
    if mounted.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs: {mounted.stderr.strip()}")
    try:
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)], check=False)


def du_kb(folder: Path) -> int:
    """Disk use of the files under ``folder`` in KiB (whole 4 KiB pages, as tmpfs counts)."""
    return sum(-(-p.stat().st_size // 4096) * 4 for p in folder.rglob("*") if p.is_file()) + 8


def fill_up_at(tiny, tmp_path, fraction: float, *, maps: bool) -> str:
    wf, ref = tiny
    if maps:
        wf = runkit.basin(tmp_path / "in-maps", maps=True)
    need = du_kb(ref) * (3 if maps else 1)
    free = int(need * fraction)
    with small_tmpfs(tmp_path / f"mnt-{uuid.uuid4().hex[:6]}", du_kb(ref) + free + 64) as mnt:
        dest = mnt / "run"
        shutil.copytree(ref, dest)
        old = runkit.snapshot(dest)
        done = runkit.lidmelt("run", str(wf), "-o", str(dest), "--quiet")
        outcome = check_outcome(dest, old, done.stderr)
        if done.returncode == 0:
            assert outcome == "new"
        else:
            assert done.returncode == 1
            assert outcome == "old"
            lines = done.stderr.strip().splitlines()
            assert lines[-1].startswith("lidmelt run: error: "), done.stderr
            assert "space" in lines[-1], lines[-1]
        assert sorted(p.name for p in mnt.iterdir()) == ONLY_RUN
        return outcome


def test_disk_full_early_keeps_the_old_run(tiny, tmp_path):
    assert fill_up_at(tiny, tmp_path, 0.05, maps=False) == "old"


@pytest.mark.slow
@pytest.mark.parametrize("fraction", [0.0, 0.2, 0.4, 0.6, 0.8, 0.95])
def test_disk_full_at_several_moments(tiny, tmp_path, fraction):
    # the free space is a fraction of the old run's size; from about 0.6 the new run (smaller:
    # the old one's pages are counted whole) may fit, and then it is complete
    outcome = fill_up_at(tiny, tmp_path, fraction, maps=False)
    assert outcome == "old" if fraction <= 0.4 else outcome in ("old", "new")


@pytest.mark.slow
@pytest.mark.parametrize("fraction", [0.45, 0.7, 0.9])
def test_disk_full_while_drawing_maps_and_report(tiny, tmp_path, fraction):
    fill_up_at(tiny, tmp_path, fraction, maps=True)


# ---- a read-only installation and HOME: numba's compiled-code cache -----------------------------
def read_only_install(tmp_path: Path) -> dict[str, str]:
    """A copy of the package and a HOME that cannot be written (for root: with the capabilities
    that bypass file permissions dropped, see :func:`as_user`), a writable TMPDIR; the
    environment of a lidmelt subprocess that imports that copy."""
    lib, home, tmp = tmp_path / "lib", tmp_path / "home", tmp_path / "tmp"
    shutil.copytree(
        runkit.PIPELINE / "lidmelt", lib / "lidmelt", ignore=shutil.ignore_patterns("__pycache__")
    )
    home.mkdir()
    tmp.mkdir()
    for path in [*lib.rglob("*"), lib, home]:
        path.chmod(0o555 if path.is_dir() else 0o444)
    env = runkit.env()
    for name in ("NUMBA_CACHE_DIR", "XDG_CACHE_HOME"):
        env.pop(name, None)
    env.update(
        HOME=str(home), TMPDIR=str(tmp), PYTHONPATH=str(lib), PYTHONDONTWRITEBYTECODE="1",
        MPLCONFIGDIR=str(tmp / "matplotlib"),  # matplotlib's own cache, not the subject here
    )  # fmt: skip
    return env


def as_user(args: list[str]) -> list[str]:
    """``args`` run so that file permissions apply: root bypasses them (CAP_DAC_OVERRIDE), so
    its capabilities to do that are dropped (util-linux setpriv; skipped where missing)."""
    if os.geteuid() != 0:
        return args
    if shutil.which("setpriv") is None:
        pytest.skip("as root, a read-only folder needs setpriv to drop CAP_DAC_OVERRIDE")
    return ["setpriv", "--bounding-set=-dac_override,-dac_read_search,-fowner", "--", *args]


def run_read_only(env: dict[str, str], *args: str, timeout: float = 300):
    return subprocess.run(
        as_user([sys.executable, *args]), env=env, capture_output=True, text=True,
        timeout=timeout, check=False,
    )  # fmt: skip


@pytest.mark.parametrize("temp_usable", [True, False], ids=["temp-folder", "uncached"])
def test_read_only_install_and_home_cache_compiled_code_elsewhere(tmp_path, temp_usable):
    env = read_only_install(tmp_path)
    folder = tmp_path / "tmp" / f"lidmelt-numba-{os.geteuid()}"
    if not temp_usable:  # a folder at that name others may write: never used (pickled code)
        folder.mkdir()
        folder.chmod(0o777)
    installed = runkit.snapshot(tmp_path / "lib")
    TALLY["faults"] += 1
    done = run_read_only(env, "-m", "lidmelt", "cache", "--info")
    assert "Traceback" not in done.stderr, done.stderr
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith("lidmelt cache: ")
    if temp_usable:
        note = (
            f"lidmelt cache: note: compiled code is cached in {folder}: the installation's folder "
            "and HOME are not writable (set NUMBA_CACHE_DIR to keep it elsewhere)"
        )
    else:
        note = (
            "lidmelt cache: note: compiled code is not cached: neither the installation's "
            "folder, HOME nor a private temporary folder is writable, so each run compiles it "
            "again (5-20 s); set NUMBA_CACHE_DIR to a writable folder"
        )
    assert done.stderr.splitlines() == [note]  # one line
    if temp_usable:  # the copy is what was imported; the Python API prints nothing
        imported = run_read_only(env, "-c", "import lidmelt.cli; print(lidmelt.__file__)")
        assert imported.returncode == 0, imported.stderr
        assert imported.stdout.strip() == str(tmp_path / "lib" / "lidmelt" / "__init__.py")
        assert imported.stderr == ""
    assert runkit.snapshot(tmp_path / "lib") == installed  # nothing written into the install
    assert (folder.stat().st_mode & 0o777) == (0o700 if temp_usable else 0o777)


@pytest.mark.slow
def test_read_only_install_compiles_into_the_temporary_folder(tmp_path):
    # a run compiles the kernel and the plate lookup (GDH1) into the private temporary folder,
    # and the next run finds them there (numba's index files); both runs give the same files
    env = read_only_install(tmp_path)
    folder = tmp_path / "tmp" / f"lidmelt-numba-{os.geteuid()}"
    wf = runkit.basin(tmp_path / "in")
    wf.write_text(wf.read_text() + '[lithosphere]\ncooling = "gdh1"\n')
    runs = []
    for name in ("a", "b"):
        done = run_read_only(env, "-m", "lidmelt", "run", str(wf), "-o", str(tmp_path / name))
        assert done.returncode == 0, done.stderr
        assert "Traceback" not in done.stderr
        assert done.stderr.splitlines()[0].startswith("lidmelt run: note: compiled code is cached")
        runs.append(open_run(tmp_path / name).summary["statistics"])
        if name == "a":
            indexes = sorted(p.name for p in folder.rglob("*.nbi"))
            # the search of the top of melting in the GDH1 geotherm (the default rule), the kernel
            assert any("geotherm_search" in n for n in indexes), indexes
            assert any("_cells" in n for n in indexes), indexes
    assert runs[0] == runs[1]
