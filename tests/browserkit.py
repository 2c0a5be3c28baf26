"""Headless chromium for the page tests: open a probe page, return what its script reported.

A test appends a script to a copy of its page that writes a JSON object into
``<pre id="probe-result">`` after layout; chromium's ``--dump-dom`` prints the DOM, and
:func:`run_probe` reads the object back.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def run_probe(probe: Path, tmp_path: Path, width: int, *, budget_ms: int, timeout: int) -> dict:
    """Render ``probe`` at ``width`` px (900 high) in a private profile; the probe's JSON."""
    cmd = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={tmp_path / f'chromium-profile-{width}'}",
        f"--window-size={width},900",
        f"--virtual-time-budget={budget_ms}",
        "--dump-dom",
        probe.as_uri(),
    ]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False)
    match = re.search(r'<pre id="probe-result">(.*?)</pre>', done.stdout, re.S)
    assert match, f"chromium gave no result (exit {done.returncode}): {done.stderr[-2000:]}"
    raw = match.group(1).replace("&quot;", '"').replace("&lt;", "<").replace("&gt;", ">")
    return json.loads(raw.replace("&amp;", "&"))
