"""Helpers of the transaction, fault and fuzz tests: a tiny invented basin, ``lidmelt`` in a
subprocess, and snapshots of what a folder holds."""

from __future__ import annotations

import hashlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
PIPELINE = ROOT / "pipeline"
#: Counts kept by test files (faults tried, fuzz cases), printed once at the end of the session
#: by ``tests/conftest.py::pytest_terminal_summary``, whatever tests ran and in whatever order.
TALLIES: dict[str, dict[str, int]] = {}


def tally(name: str, **counts: int) -> dict[str, int]:
    """The session's tally ``name`` (made with ``counts`` the first time), to add to."""
    return TALLIES.setdefault(name, dict(counts))


def write_age(path: Path, *, nan: bool = False, shape=(24, 36)) -> Path:
    """An invented plate-age grid (Ma) at 0.25 degree, west of 30 W; all NaN with ``nan``."""
    import rasterio
    from rasterio.transform import from_origin

    lon = 0.25 * (np.arange(shape[1]) + 0.5)
    age = np.broadcast_to(2.0 * lon + 0.5, shape).astype("float32")
    if nan:
        age = np.full(shape, np.nan, "float32")
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        height=shape[0],
        width=shape[1],
        count=1,
        dtype="float32",
        crs="EPSG:4326",
        transform=from_origin(-30, 10, 0.25, 0.25),
        nodata=np.nan,
    ) as dst:
        dst.write(age, 1)
        dst.units = ("Ma",)
    return path


def basin(folder: Path, *, extra: str = "", maps: bool = False, nan: bool = False) -> Path:
    """A tiny invented basin (24 x 36 cells, one plume) and its workflow file; return the file."""
    folder.mkdir(parents=True, exist_ok=True)
    write_age(folder / "age.tif", nan=nan)
    wf = folder / "basin.toml"
    flag = "true" if maps else "false"
    wf.write_text(
        f"""
[run]
name = "tiny"
maps = {flag}
report = {flag}
netcdf = true
[grid]
like = "plate_age"
[inputs.plate_age]
path = "age.tif"
[inputs.thermal_anomaly]
[[inputs.thermal_anomaly.plumes]]
longitude = -25.0
latitude = 7.0
radius_km = 300.0
peak_excess_k = 250.0
[inputs.water]
constant = 0.0
[compute]
chunk_size = 64
{extra}
""",
        encoding="utf-8",
    )
    return wf


def env() -> dict[str, str]:
    """The environment of a ``lidmelt`` subprocess: this worktree's code, the test cache."""
    out = dict(os.environ)
    out["PYTHONPATH"] = os.pathsep.join([str(PIPELINE), out.get("PYTHONPATH", "")])
    return out


def command(*args: str) -> list[str]:
    return [sys.executable, "-m", "lidmelt", *args]


def lidmelt(*args: str, timeout: float = 300) -> subprocess.CompletedProcess:
    """Run ``lidmelt ARGS`` in a subprocess; return the completed process (text output)."""
    return subprocess.run(
        command(*args), env=env(), capture_output=True, text=True, timeout=timeout, check=False
    )


def _default_sigint() -> None:
    """In the child: SIGINT back to its default action, as in a terminal's foreground job."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def start(*args: str) -> subprocess.Popen:
    """Start ``lidmelt ARGS`` in a subprocess (its output captured) that takes SIGINT as a
    Ctrl-C: a test session started in the background by a non-interactive shell ignores SIGINT,
    and its children would inherit that (the fault tests' SIGINT would then never land)."""
    return subprocess.Popen(
        command(*args), env=env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        preexec_fn=_default_sigint,
    )  # fmt: skip


def snapshot(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` (hidden ones too) by relative name -> SHA-256."""
    out = {}
    for path in sorted(folder.rglob("*")):
        if path.is_file() and not path.is_symlink():
            out[path.relative_to(folder).as_posix()] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


def wait_for(predicate, *, timeout: float = 120.0, poll: float = 0.002) -> bool:
    """Poll ``predicate()`` until true (True) or ``timeout`` seconds pass (False)."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(poll)
    return False


def staged(parent: Path, name: str, pattern: str = "*") -> list[Path]:
    """Files matching ``pattern`` inside the staging folders of run ``name`` under ``parent``."""
    return [p for root in parent.glob(f".{name}.staging-*") for p in root.glob(f"{name}/{pattern}")]


def refused(err: str, command: str, *parts: str) -> str:
    """Check that ``err`` (a command's stderr) is one refusal: a single line ``lidmelt COMMAND:
    error: ...`` holding every one of ``parts`` (the file or key, the figure, the fix), no
    traceback, at most about 2000 characters (lidmelt.cli._failures.MESSAGE_CHARS); return it.
    Warnings and notes printed before it (their own lines) are allowed."""
    assert "Traceback" not in err, err
    lines = err.strip().splitlines()
    assert lines, "nothing on stderr"
    line = lines[-1]
    assert line.startswith(f"lidmelt {command}: error: "), err
    assert all(not x.startswith(f"lidmelt {command}: error") for x in lines[:-1]), err
    assert len(line) <= 2100, len(line)
    for part in parts:
        assert part in line, (part, line)
    return line
