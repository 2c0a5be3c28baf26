"""``lidmelt column``: melting beneath one site (one column)."""

from __future__ import annotations

import argparse
import csv
import json
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._config import DEFAULT_CRUST_DENSITY_KG_M3
from lidmelt._errors import InputError
from lidmelt._files import atomic_path
from lidmelt._variables import INPUTS, OUTPUTS
from lidmelt.physics import (
    TOP_OF_MELTING_RULES,
    column_profile,
    evaluate_cells,
    get_cooling_model,
    get_model,
    get_table,
    isotherm_depth_km,
)
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._cooling import seafloor_depth_m
from lidmelt.physics._defaults import DEFAULT_AMBIENT_TP_C, DEFAULT_COOLING, DEFAULT_LID_ISOTHERM_C
from lidmelt.physics._flags import (
    FLAG_BEYOND_CALIBRATION,
    FLAG_INVALID_INPUT,
    FLAG_NO_ONSET,
    FLAG_UPPER_MANTLE_FLOOR,
    FLAG_WATER_SATURATED,
)
from lidmelt.physics._geotherm import DEFAULT_TOP_OF_MELTING, geotherm_tops, geotherm_tops_direct
from lidmelt.physics._kernel_records import Cells
from lidmelt.physics._pressure import water_load_km

#: Meanings of the melting regime values (the registry's, docs/physics.md).
_REGIMES = {c.value: f"({c.label})" for c in OUTPUTS["melting_regime"].classes}


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt column``."""
    p = subparsers.add_parser(
        "column",
        help="melting beneath one site (one column)",
        description=(
            "Melt production of upwelling mantle beneath one lid: onset depth, melt thickness, "
            "melt fraction and the excess temperature needed to melt. Give the mantle as "
            "--potential-temperature, or as --excess-temperature above --ambient; give the lid "
            "as --lid-depth, or as --age through a cooling model."
        ),
    )
    _add_mantle_options(p)
    _add_lid_options(p)
    _add_model_options(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument(
        "--profile",
        type=Path,
        metavar="FILE.csv",
        help="write depth, pressure, temperature and melt fraction along the column",
    )
    p.set_defaults(func=run)


def _add_mantle_options(p: argparse.ArgumentParser) -> None:
    tp = p.add_mutually_exclusive_group(required=True)
    tp.add_argument(
        "--potential-temperature",
        type=float,
        metavar="C",
        help="mantle potential temperature Tp [deg C]",
    )
    tp.add_argument(
        "--excess-temperature",
        type=float,
        metavar="K",
        help="thermal anomaly above the ambient Tp [K]",
    )
    p.add_argument(
        "--ambient",
        type=float,
        default=None,
        metavar="C",
        help=f"ambient potential temperature [deg C] (default {DEFAULT_AMBIENT_TP_C:g}, "
        "Herzberg et al. 2010, with --excess-temperature; with --potential-temperature the "
        "excess to melt and the melt the anomaly adds are shown only when it is given)",
    )
    p.add_argument(
        "--water",
        type=float,
        default=0.0,
        metavar="WT_PCT",
        help="water in the bulk source [wt%%] (default 0; 0.01 = 100 ppm)",
    )


def _add_lid_options(p: argparse.ArgumentParser) -> None:
    lid = p.add_mutually_exclusive_group(required=True)
    lid.add_argument(
        "--lid-depth",
        type=float,
        metavar="KM",
        help="depth of the lid base below the seafloor [km]",
    )
    lid.add_argument("--age", type=float, metavar="MA", help="plate age [Ma]")
    p.add_argument(
        "--cooling",
        default=DEFAULT_COOLING,
        choices=["half-space", "gdh1", "ps77"],
        help=f"cooling model for --age (default {DEFAULT_COOLING})",
    )
    p.add_argument(
        "--top-of-melting",
        default=DEFAULT_TOP_OF_MELTING,
        choices=TOP_OF_MELTING_RULES,
        help="with --age: 'geotherm' (melting stops where the column meets the cooling model's "
        "conductive geotherm, whose mantle side is the column's own isentrope) or 'isotherm' "
        f"(at the lid isotherm) (default {DEFAULT_TOP_OF_MELTING})",
    )
    p.add_argument(
        "--lid-isotherm",
        type=float,
        default=DEFAULT_LID_ISOTHERM_C,
        metavar="C",
        help="isotherm that defines the lid base with --top-of-melting isotherm [deg C] "
        f"(default {DEFAULT_LID_ISOTHERM_C:g})",
    )
    p.add_argument(
        "--water-depth",
        type=float,
        default=None,
        metavar="M",
        help="water depth above the seafloor [m], whose weight loads the column (default: with "
        "--age the cooling model's seafloor depth at that age; with --lid-depth none)",
    )
    p.add_argument(
        "--min-top",
        type=float,
        default=7.0,
        metavar="KM",
        help="melting stops at max(lid, this depth) [km] (default 7, the crust base)",
    )
    p.add_argument(
        "--crust-density",
        type=float,
        default=DEFAULT_CRUST_DENSITY_KG_M3,
        metavar="KG_M3",
        help="crust density of the crustal thickness [kg/m3] (default "
        f"{DEFAULT_CRUST_DENSITY_KG_M3:g}, common practice)",
    )


def _add_model_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--model",
        default="katz2003",
        help="melting model: katz2003 (default) or mckenzie-bickle1988",
    )
    p.add_argument(
        "--param",
        action="append",
        metavar="NAME=VALUE",
        help="override a model parameter (repeatable), e.g. cpx_mass_fraction=0.15",
    )
    p.add_argument(
        "--method",
        choices=["direct", "table"],
        default="direct",
        help="direct integration (default for one column) or the fast table",
    )


def _parse_params(items: list[str] | None) -> dict[str, float]:
    params = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        try:
            if not sep:
                raise ValueError
            params[key.strip()] = float(value)
        except ValueError:
            msg = f"--param {item!r} must be NAME=NUMBER, e.g. --param cpx_mass_fraction=0.15."
            raise InputError(msg) from None
    return params


def _check_numbers(args: argparse.Namespace) -> None:
    """Refuse non-finite and negative values of the numeric options, naming the option."""
    for value, option, unit in (
        (args.potential_temperature, "--potential-temperature", "deg C"),
        (args.excess_temperature, "--excess-temperature", "K"),
        (args.ambient, "--ambient", "deg C"),
        (args.lid_depth, "--lid-depth", "km"),
        (args.age, "--age", "Ma"),
        (args.water, "--water", "wt%"),
        (args.min_top, "--min-top", "km"),
        (args.lid_isotherm, "--lid-isotherm", "deg C"),
        (args.crust_density, "--crust-density", "kg/m3"),
        (args.water_depth, "--water-depth", "m"),
    ):
        if value is not None and not math.isfinite(value):
            msg = f"{option} {value!r} is not a finite number; give a value in {unit}."
            raise InputError(msg)
    negative = {
        "--age": (args.age, "{:g} is negative; plate age is in Ma, 0 at the ridge."),
        "--lid-depth": (
            args.lid_depth,
            "{:g} km is negative; give the lid base depth below the seafloor.",
        ),
        "--water": (args.water, "{:g} is negative; give the bulk water content in wt% (>= 0)."),
        "--min-top": (args.min_top, "{:g} km is negative; give a depth >= 0."),
        "--crust-density": (args.crust_density, "{:g} is not > 0; give kg/m3 (crust ~2900)."),
        "--water-depth": (args.water_depth, "{:g} m is negative; give the depth below sea level."),
    }
    for option, (value, text) in negative.items():
        if value is not None and (value < 0 or (option == "--crust-density" and value == 0)):
            msg = f"{option} " + text.format(value)
            raise InputError(msg)
    low, high = INPUTS["water_wt_pct"].valid_range
    if not low <= args.water <= high:
        msg = (
            f"--water {args.water:g} wt% is outside {low:g} to {high:g} wt%: expected "
            f"{INPUTS['water_wt_pct'].advice} (--water {args.water / 1e4:g} if you meant "
            f"{args.water:g} ppm)."
        )
        raise InputError(msg)


#: Sanity bounds of options without a registry range (not published values: a mantle hotter
#: than 3000 deg C or a crust denser than 10000 kg/m3 is outside any model here; common practice).
_SANE = {
    "--potential-temperature": ("potential_temperature", 0.0, 3000.0, "deg C"),
    "--ambient": ("ambient", 0.0, 3000.0, "deg C"),
    "--lid-isotherm": ("lid_isotherm", 0.0, 3000.0, "deg C"),
    "--crust-density": ("crust_density", 1000.0, 10000.0, "kg/m3"),
    "--water-depth": ("water_depth", 0.0, 11000.0, "m"),
}
#: Options checked against the registry's valid range of an input variable.
_REGISTRY = {
    "--lid-depth": ("lid_depth", "lid_thickness_km"),
    "--min-top": ("min_top", "lid_thickness_km"),
    "--age": ("age", "plate_age_ma"),
    "--excess-temperature": ("excess_temperature", "thermal_anomaly_k"),
}


def _check_ranges(args: argparse.Namespace) -> None:
    """Refuse values outside their physical range (the registry's, or a sanity bound)."""
    bounds = {opt: (attr, lo, hi, unit) for opt, (attr, lo, hi, unit) in _SANE.items()}
    for option, (attr, name) in _REGISTRY.items():
        low, high = INPUTS[name].valid_range
        bounds[option] = (attr, low, high, INPUTS[name].units)
    for option, (attr, low, high, unit) in bounds.items():
        value = getattr(args, attr, None)
        if value is not None and not low <= value <= high:
            msg = (
                f"{option} {value:g} {unit} is outside {low:g} to {high:g} {unit}. Give a value "
                "in that range (check the unit)."
            )
            raise InputError(msg)


def _unit_hints(args: argparse.Namespace, tp: float) -> list[str]:
    """Notes on values that look like unit mistakes (water in ppm, Tp in kelvin, an absolute
    temperature given as an excess)."""
    notes = []
    if args.water > 0.1:
        notes.append(
            f"--water {args.water:g} wt% is far wetter than oceanic mantle (about 0.005-0.03 "
            f"wt%, from memory); if you meant {args.water:g} ppm, give --water {args.water / 1e4:g}"
        )
    if args.potential_temperature is None:  # an excess is a difference: kelvin = degrees C
        excess = args.excess_temperature
        if excess > _PLUME_EXCESS_K:
            notes.append(
                f"--excess-temperature {excess:g} K is hotter than plume estimates (about "
                f"100-300 K above ambient, from memory); it is the excess above the ambient "
                f"potential temperature ({tp - excess:g} C), so the column is at Tp {tp:g} C. If "
                f"{excess:g} is the potential temperature itself, give --potential-temperature "
                f"{excess:g}"
            )
        return notes
    in_kelvin = tp - 273.15
    if tp > 1500.0 and 1250.0 <= in_kelvin <= 1450.0:
        notes.append(
            f"Tp {tp:g} C is hotter than ambient mantle (about 1300-1400 C); if it is in kelvin, "
            f"give --potential-temperature {in_kelvin:g}"
        )
    elif tp > 1900.0:
        notes.append(
            f"Tp {tp:g} C is hotter than hotspot estimates (up to about 1800 C); is it in kelvin "
            f"({in_kelvin:g} C)?"
        )
    return notes


#: An excess above this (K) is noted as a possible absolute temperature: plume excesses are
#: about 100-300 K (from memory; the registry's thermal anomaly advice gives the same range).
_PLUME_EXCESS_K = 500.0


def _geotherm(args: argparse.Namespace) -> bool:
    """Whether the top of melting comes from the geotherm rule (``--age`` given)."""
    return args.age is not None and args.top_of_melting == "geotherm"


def _lid_km(args, model, tp: float, ambient: float, load: float) -> tuple[float, dict[str, float]]:
    """The lid base [km]: given, or from ``--age``: the lid isotherm's depth in the cooling
    model, or the geotherm top (+inf where the column meets its geotherm nowhere) with the
    ambient column's top and the excess to melt for :func:`evaluate_cells` (``load``: the water
    load's rock-equivalent depth [km], beneath which the geotherm's depths are measured)."""
    if args.age is None:
        return float(args.lid_depth), {}
    cooling = get_cooling_model(args.cooling)
    if not _geotherm(args):
        return float(isotherm_depth_km(args.lid_isotherm, args.age, model=cooling)), {}
    kw = {"ambient_c": ambient, "min_top_km": args.min_top, "water_load_km": load}
    if args.method == "table":
        tops = geotherm_tops(get_table(model), cooling, tp, args.water, args.age, **kw)
    else:
        tops = geotherm_tops_direct(model, cooling, tp, args.water, args.age, **kw)
    top, amb, excess = (float(v) for v in tops)
    return top, {"ambient_lid_depth_km": amb, "excess_k": excess}


def _water_depth_m(args: argparse.Namespace) -> float:
    """The water depth [m]: given, else the cooling model's seafloor depth at ``--age``
    (:func:`lidmelt.physics._cooling.seafloor_depth_m`), else 0 (no water load)."""
    if args.water_depth is not None:
        return float(args.water_depth)
    if args.age is None:
        return 0.0
    return float(seafloor_depth_m(args.age, model=get_cooling_model(args.cooling)))


def _check_flag(flag: int, model: Any, tp: float, args: argparse.Namespace, res: Any) -> None:
    """Turn the flags of an unusable column into an error that says what to change."""
    if flag & FLAG_INVALID_INPUT:
        if not model.hydrous and args.water > 0:
            msg = (
                f"model {model.name} is anhydrous, but --water is {args.water:g} wt%. Use "
                "--model katz2003 for a hydrous source, or --water 0."
            )
        else:
            msg = (
                f"potential temperature {tp:g} C is at or below the surface solidus of "
                f"{model.name} ({float(model.solidus_c(0.0)):.1f} C): the mantle cannot melt. "
                "Give a Tp above it (ambient upper mantle is about 1300-1400 C)."
            )
        raise InputError(msg)
    if flag & FLAG_WATER_SATURATED:
        held = float(model.water_saturated_bulk_wt_pct(res["onset_pressure_gpa"]))
        msg = (
            f"--water {args.water:g} wt% is above the water the solid source holds at the "
            f"onset ({held:.3g} wt%): the source would carry free water, outside the "
            "batch-melting model. Give a lower --water (oceanic mantle holds about 0.005-0.03 "
            "wt%)."
        )
        raise InputError(msg)
    if flag & FLAG_NO_ONSET:
        msg = (
            f"the isentrope of Tp {tp:g} C does not meet the {model.name} solidus above "
            f"{model.max_onset_pressure_gpa:g} GPa, so the column has no defined onset. Give "
            "a lower Tp or less water (this model is calibrated for onsets shallower than "
            f"{model.calibrated_max_pressure_gpa:g} GPa)."
        )
        raise InputError(msg)


def run(args: argparse.Namespace) -> int:
    """Evaluate one column and print it as a table or as JSON."""
    _check_numbers(args)
    _check_ranges(args)
    model = get_model(args.model, **_parse_params(args.param))
    if args.potential_temperature is not None:
        tp, ambient = args.potential_temperature, args.ambient
    else:
        ambient = DEFAULT_AMBIENT_TP_C if args.ambient is None else args.ambient
        tp = ambient + args.excess_temperature
    water_depth = _water_depth_m(args)
    load = float(water_load_km(water_depth, model.lithostatic_density_kg_m3))
    for note in _unit_hints(args, tp):  # before any error, which they may explain
        print(f"note: {note}.", file=sys.stderr)
    lid, given = _lid_km(args, model, tp, tp if ambient is None else ambient, load)
    options = CellOptions(
        ambient_potential_temperature_c=tp if ambient is None else ambient, model=model,
        method=args.method, min_top_km=args.min_top, crust_density_kg_m3=args.crust_density,
    )  # fmt: skip
    res = evaluate_cells(
        Cells(tp, lid, args.water, water_load_km=load, **given), options, dtype=np.float64
    )
    out, flag = dict(res.outputs), int(res.flag)
    _check_flag(flag, model, tp, args, out)
    values = {name: float(v) for name, v in out.items()}
    if ambient is None:  # only Tp given: no ambient to compare with
        for name in ("excess_to_melt_k", "anomaly_melt_thickness_km", "melting_regime"):
            values.pop(name)
    values["ambient_potential_temperature_c"] = math.nan if ambient is None else ambient
    values["water_depth_m"] = water_depth
    if args.profile:
        top = lid if math.isfinite(lid) else values["solidus_crossing_depth_km"]
        prof = column_profile(
            tp, top, args.water, model=model, min_top_km=args.min_top, water_load_km=load
        )
        _write_profile_csv(args.profile, prof)
    if flag & FLAG_BEYOND_CALIBRATION:
        print(
            f"note: the onset ({values['onset_pressure_gpa']:.2f} GPa) or the top of melting is "
            f"deeper than the {model.name} calibration ({model.calibrated_max_pressure_gpa:g} "
            "GPa): the result rests on the continued phase boundaries; treat it as an "
            "extrapolation"
            + (
                " (the isentrope is above the solidus at the upper mantle's floor, PREM's 400 km:"
                " melting is counted from there)."
                if flag & FLAG_UPPER_MANTLE_FLOOR
                else "."
            ),
            file=sys.stderr,
        )
    if args.json:
        print(json.dumps(_json_document(args, model, tp, lid, flag, values), indent=2))
    else:
        _print_table(args, model, tp, lid, values)
    return 0


def _json_document(args, model, tp: float, lid: float, flag: int, values: dict) -> dict:
    doc: dict[str, Any] = {k: (None if not math.isfinite(v) else v) for k, v in values.items()}
    doc.update(
        {
            "potential_temperature_c": tp,
            "water_wt_pct": args.water,
            "validity_flag": flag,
            "model": model.name,
            "model_parameters": model.parameters(),
        }
    )
    if args.age is not None:
        geotherm = _geotherm(args)
        doc.update(
            {
                "plate_age_ma": args.age,
                "cooling": args.cooling,
                "top_of_melting": args.top_of_melting,
                "lid_isotherm_c": None if geotherm else args.lid_isotherm,
                "lid_base_km": None if geotherm else lid,
            }
        )
    return doc


def _print_table(args, model, tp: float, lid: float, values: dict) -> None:
    lid_label = "lid base"
    if args.age is not None:
        lid_label += f" ({args.cooling}, {args.lid_isotherm:g} C at {args.age:g} Ma)"
    top_label = "top of melting"
    if _geotherm(args):
        top_label += f" (meets the {args.cooling} geotherm at {args.age:g} Ma)"
    rows = [
        ("potential temperature", tp, "C"),
        *(() if _geotherm(args) else ((lid_label, lid, "km"),)),
        (top_label, values["melting_top_km"], "km"),
        ("onset depth", values["onset_depth_km"], "km"),
        ("onset pressure", values["onset_pressure_gpa"], "GPa"),
        ("solidus crossing (whatever the lid)", values["solidus_crossing_depth_km"], "km"),
        ("melt thickness", values["melt_thickness_km"], "km"),
        ("max melt fraction", values["max_melt_fraction"], ""),
        ("mean melt pressure", values["mean_melt_pressure_gpa"], "GPa"),
        ("melt made beyond the calibrated pressure", values["deep_melt_share"], "(share)"),
        ("water depth (its weight loads the column)", values["water_depth_m"], "m"),
        (
            "crustal thickness",
            values["crustal_thickness_km"],
            f"km (crust {args.crust_density:g} kg/m3)",
        ),
    ]
    ambient = values["ambient_potential_temperature_c"]
    if math.isfinite(ambient):
        rows += [
            ("ambient potential temperature", ambient, "C"),
            ("excess to melt", values["excess_to_melt_k"], f"K above {ambient:g} C"),
            ("melt the anomaly adds", values["anomaly_melt_thickness_km"], "km"),
            ("melting regime", values["melting_regime"], _REGIMES[int(values["melting_regime"])]),
        ]
    print(f"lidmelt column: {model.name}, water {args.water:g} wt%")
    for label, value, unit in rows:
        text = "-" if not math.isfinite(value) else f"{value:10.3f}"
        print(f"  {label:<48} {text:>10} {unit}")
    if not math.isfinite(ambient):
        print("  (no ambient Tp given: give --ambient C for the excess to melt and the melt the")
        print("   anomaly adds)")
    if _geotherm(args) and not math.isfinite(lid):
        print("  (the column meets its geotherm nowhere below the crust base: its onset lies in")
        print("   the lid, so it does not melt; docs/physics.md, 'One mantle beneath the lid')")
    if args.profile:
        print(f"profile written to {args.profile}")


def _write_profile_csv(path: Path, prof: dict) -> None:
    path = Path(path)
    if not path.parent.exists():
        msg = f"--profile folder {str(path.parent)!r} does not exist; create it or pick another."
        raise InputError(msg)
    columns = ["depth_km", "pressure_gpa", "temperature_c", "melt_fraction"]
    with atomic_path(path) as temp, temp.open("w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(columns)
        for row in zip(*(prof[c] for c in columns), strict=True):
            writer.writerow([f"{v:.6g}" for v in row])
