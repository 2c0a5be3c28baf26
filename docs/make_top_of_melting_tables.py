"""Print the tables of docs/physics.md, "One mantle beneath the lid" (Markdown).

    .venv/bin/python docs/make_top_of_melting_tables.py

Ambient melt thickness against plate age for the three cooling models under both rules for the
top of melting (dry and 0.01 wt% water), hot columns, and the jumps where the geotherm first
touches the column (the fold). Katz et al. (2003) dry or wet, ambient Tp 1350 C, minimum top
7 km, the lid isotherm 1100 C; the water above the seafloor loads every column as in a run
without bathymetry (the cooling model's seafloor depth at the age,
lidmelt.physics._cooling.seafloor_depth_m; lidmelt.physics._pressure.water_load_km); every number
by lidmelt's Python API on the melting table (lidmelt.physics.evaluate_cells; the geotherm tops
by lidmelt.physics.geotherm_tops).
"""

from __future__ import annotations

import numpy as np

from lidmelt.physics import evaluate_cells, get_cooling_model, get_table
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._cooling import seafloor_depth_m
from lidmelt.physics._geotherm import geotherm_tops
from lidmelt.physics._kernel_records import Cells
from lidmelt.physics._lidlookup import lid_lookup
from lidmelt.physics._pressure import water_load_km

MODELS = ("half-space", "gdh1", "ps77")
AGES = (0.0, 1.0, 5.0, 10.0, 15.0, 20.0, 30.0, 45.0, 60.0, 80.0, 100.0, 150.0)
AMBIENT = 1350.0
TABLE = get_table("katz2003")


def melt(rule: str, cooling: str, tp, water: float, age) -> np.ndarray:
    """Melt thickness [km] of columns of Tp at these ages under one rule."""
    cm = get_cooling_model(cooling)
    tp, age = np.broadcast_arrays(np.asarray(tp, float), np.asarray(age, float))
    load = water_load_km(seafloor_depth_m(age, model=cm))
    extra = {}
    if rule == "geotherm":
        lid, amb, excess = geotherm_tops(
            TABLE, cm, tp, water, age, ambient_c=AMBIENT, water_load_km=load
        )
        extra = {"ambient_lid_depth_km": amb, "excess_k": excess}
    else:
        lid = lid_lookup(1100.0, model=cm).depth_km(age)
    out = evaluate_cells(
        Cells(tp, lid, water, water_load_km=load, **extra),
        CellOptions(ambient_potential_temperature_c=AMBIENT, table=TABLE),
        dtype=np.float64,
    )
    return out.outputs["melt_thickness_km"]


def ambient_table() -> None:
    print("| water | rule | cooling | " + " | ".join(f"{a:g} Ma" for a in AGES) + " |")
    print("|---" * (len(AGES) + 3) + "|")
    for water in (0.0, 0.01):
        for rule in ("isotherm", "geotherm"):
            for cooling in MODELS:
                h = melt(rule, cooling, AMBIENT, water, np.array(AGES))
                cells = " | ".join(f"{v:.2f}" for v in h)
                print(f"| {water:g} wt% | {rule} | {cooling} | {cells} |")


def hot_table() -> None:
    ages = (0.0, 10.0, 30.0, 60.0, 100.0)
    print("| Tp | rule | cooling | " + " | ".join(f"{a:g} Ma" for a in ages) + " |")
    print("|---" * (len(ages) + 3) + "|")
    for tp in (1450.0, 1550.0):
        for rule in ("isotherm", "geotherm"):
            for cooling in MODELS:
                h = melt(rule, cooling, tp, 0.0, np.array(ages))
                cells = " | ".join(f"{v:.2f}" for v in h)
                print(f"| {tp:g} C | {rule} | {cooling} | {cells} |")


def fold_in_age(cooling: str, water: float) -> tuple[float, float]:
    """(the age [Ma] where the ambient column stops melting, its melt just before)."""
    lo, hi = 0.0, 400.0
    if melt("geotherm", cooling, AMBIENT, water, hi) > 0:
        return float("nan"), float("nan")
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if melt("geotherm", cooling, AMBIENT, water, mid) > 0 else (lo, mid)
    return lo, float(melt("geotherm", cooling, AMBIENT, water, lo))


def fold_in_tp(cooling: str, age: float) -> tuple[float, float]:
    """(the least Tp [C] that melts at this age, dry, and its melt)."""
    cm = get_cooling_model(cooling)
    load = water_load_km(seafloor_depth_m(age, model=cm))
    excess = geotherm_tops(TABLE, cm, AMBIENT, 0.0, age, ambient_c=AMBIENT, water_load_km=load)
    tp = AMBIENT + float(excess[2])
    return tp, float(melt("geotherm", cooling, tp + 0.01, 0.0, age))


def fold_table() -> None:
    print("| cooling | water | ambient melts until | melt just before | least melting Tp at 60 Ma"
          " | its melt | at 100 Ma | its melt |")  # fmt: skip
    print("|---" * 8 + "|")
    for cooling in MODELS:
        for water in (0.0, 0.01):
            age, h = fold_in_age(cooling, water)
            t60, h60 = fold_in_tp(cooling, 60.0)
            t100, h100 = fold_in_tp(cooling, 100.0)
            tail = f"{t60:.1f} C | {h60:.2f} km | {t100:.1f} C | {h100:.2f} km"
            if water > 0:
                tail = "(dry only) | | |"
            print(f"| {cooling} | {water:g} wt% | {age:.2f} Ma | {h:.2f} km | {tail} |")


if __name__ == "__main__":
    ambient_table()
    print()
    hot_table()
    print()
    fold_table()
