"""Make the INVENTED plate motion and dated seamounts of the demo basin (no real plate, no data).

Run from the project root (after make_demo_grids.py):

    .venv/bin/python grids_demo/make_demo_motion.py

It writes, next to itself:

* ``demo_rotations.csv``   finite rotations of the invented plate over the plumes (0-40 Ma): a
  stage pole at 53 N, 132 E for 0-20 Ma (the plate moving east-south-east at about 50 km/Myr
  near the plumes), then one at 70 N, 150 W for 20-40 Ma (east-north-east, about 40 km/Myr), so
  the hotspot tracks bend at 20 Ma
* ``demo_seamounts.csv``   invented dated seamounts along the track of the Ardent plume: their
  "observed" ages are the track's times plus invented scatter, with invented errors (fixed
  seed), and one seamount off every track

Every file says it is invented; each is written to a temporary name and renamed when complete.
Nothing here is a check value of any test.
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "pipeline"))

from lidmelt.motion.rotations import (  # noqa: E402
    RotationHistory,
    compose,
    finite_rotation,
    pole_and_angle,
)

SEED = 20260102
SCENARIO = "INVENTED demo scenario: not a real plate motion, not real data"
#: The invented stage rotations: (from, to) Ma, Euler pole (lat, lon), angle (degrees).
STAGES = [((0.0, 20.0), (53.0, 132.0), -11.4), ((20.0, 40.0), (70.0, -150.0), -6.6)]
ARDENT = (-40.5, -6.0)
#: Times (Ma) of the invented seamounts on Ardent's track, and their invented age errors (Myr).
SEAMOUNT_TIMES = [1.5, 4.0, 7.0, 10.5, 13.0, 17.0, 22.0, 27.0, 33.0]
SEAMOUNT_ERRORS = [0.3, 0.5, 0.6, 0.8, 0.7, 1.0, 1.2, 1.5, 2.0]


def total_rotations(ages: list[float]) -> list[tuple[float, float, float, float]]:
    """(age, pole lat, pole lon, angle) of the total rotation R(t) at each age: the stages
    composed, each stage turning about its pole at a constant rate."""
    rows = []
    for age in ages:
        total = finite_rotation(90.0, 0.0, 0.0)
        for (t0, t1), (plat, plon), angle in STAGES:
            if age <= t0:
                break
            part = (min(age, t1) - t0) / (t1 - t0)
            total = compose(total, finite_rotation(plat, plon, angle * part))
        lat, lon, ang = pole_and_angle(total)
        rows.append((age, float(lat), float(lon), float(ang)))
    return rows


def write_csv(path: Path, header: list[str], rows: list[tuple], comment: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    with tmp.open("w", newline="", encoding="utf-8") as f:
        if comment:  # the point readers take the first line as the header: no comment there
            f.write(f"# {comment}\n")
        writer = csv.writer(f)
        writer.writerow(header)
        writer.writerows(rows)
    tmp.replace(path)


def main() -> None:
    rows = total_rotations([10.0, 20.0, 30.0, 40.0])
    rounded = [(a, round(la, 4), round(lo, 4), round(an, 4)) for a, la, lo, an in rows]
    write_csv(HERE / "demo_rotations.csv", ["age_ma", "pole_lat", "pole_lon", "angle_deg"],
              rounded, SCENARIO)  # fmt: skip
    hist = RotationHistory.from_rows(*zip(*rounded, strict=True))
    t = np.array(SEAMOUNT_TIMES)
    lon, lat = hist.track(*ARDENT, t)
    rng = np.random.default_rng(SEED)
    ages = t + rng.normal(0.0, 1.0, t.size) * np.array(SEAMOUNT_ERRORS)
    lon = lon + rng.normal(0.0, 0.08, t.size)
    lat = lat + rng.normal(0.0, 0.08, t.size)
    names = [f"Ardent chain {k}" for k in range(1, t.size + 1)]
    seamounts = [
        (n, round(float(x), 3), round(float(y), 3), round(float(a), 2), e, "INVENTED")
        for n, x, y, a, e in zip(names, lon, lat, ages, SEAMOUNT_ERRORS, strict=True)
    ]
    seamounts.append(("Lone knoll", -36.0, -14.0, 12.0, 1.0, "INVENTED"))  # off every track
    header = ["name", "lon", "lat", "age_ma", "age_error_ma", "note"]
    write_csv(HERE / "demo_seamounts.csv", header, seamounts, "")
    for row in rounded:
        print("rotation", row)
    for row in seamounts:
        print("seamount", row)


if __name__ == "__main__":
    main()
