"""Every input and output variable of a lidmelt run, in one registry.

The engine, the workflow checks, the GeoTIFF and NetCDF attributes, the maps, the report and
the command-line tables all read this module; adding an output variable is one :class:`Variable`
entry here plus its computation in :mod:`lidmelt.physics._evaluate`.

Physical ranges of inputs are common practice (wider than any real Earth value, so that only unit
mistakes fall outside), with the advice printed when a value is outside. Each output's meaning is
the definition lidmelt fixes (docs/physics.md, "Definitions").
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace

import numpy as np

from lidmelt._errors import InputError


@dataclass(frozen=True)
class VariableClass:
    """One class of a categorical variable: its value, a one-word key and its meaning.

    The key is the CF ``flag_meanings`` word (blank-free; CF conventions 1.8, section 3.5
    "Flags", from memory); the label is what maps, legends, sampling and the report print.
    """

    value: int
    key: str
    label: str


@dataclass(frozen=True, kw_only=True)
class Variable:
    """One variable of a run.

    Parameters
    ----------
    name : str
        File and variable name; the unit is in the suffix (``_km``, ``_gpa``, ``_k``, ...).
    units : str
        UDUNITS-style unit written to GeoTIFF tags and NetCDF attributes ("1" = dimensionless).
    long_name : str
        Readable name for titles, tables and the CF ``long_name`` attribute.
    kind : str
        ``"output"`` (computed by the kernel), ``"input"`` (an aligned workflow input) or
        ``"flag"`` (the validity bit flags), ``"ensemble"`` (a reduction over ensemble members)
        or ``"history"`` (a reduction over the steps of a history through time).
    style : str
        Key of the map style (colour scale, limits) in the presentation registry of the maps.
    valid_range : tuple of float, optional
        ``(low, high)`` physical range of an input; values outside are refused as unit mistakes.
    advice : str
        What the value is expected to be and how to fix a unit mistake (inputs only).
    workflow_key : str
        The workflow's name of an input (``[inputs.<workflow_key>]``).
    zero_means_no_melt : bool
        0 marks a valid cell that does not melt (drawn as "no melting", not as data).
    categorical : bool
        The values are classes, not amounts: they are sampled at the nearest cell centre, never
        interpolated.
    undefined_without_melt : bool
        The value may be NaN in a valid cell that does not melt (e.g. the mean melt pressure);
        maps draw such cells as "no melting" rather than as nodata.
    default : bool
        Written when the workflow's ``[outputs]`` table does not list the variables (outputs
        only); False: written only when listed.
    needs : str
        The workflow input (``workflow_key``) an output needs; without that input the output is
        neither computed nor written (``""``: none).
    classes : tuple of VariableClass
        The classes of a categorical variable, in value order: the one place their meanings are
        written (maps, legends, NetCDF ``flag_values``/``flag_meanings``, sampling, the report).
    negligible_below : float
        Values below this are drawn and counted as none; the file keeps the exact value (0:
        every value counts).
    """

    name: str
    units: str
    long_name: str
    kind: str = "output"
    style: str = ""
    valid_range: tuple[float, float] | None = None
    advice: str = ""
    workflow_key: str = ""
    zero_means_no_melt: bool = False
    undefined_without_melt: bool = False
    categorical: bool = False
    default: bool = True
    needs: str = ""
    classes: tuple[VariableClass, ...] = ()
    negligible_below: float = 0.0

    @property
    def title(self) -> str:
        """The long name with a capital first letter, for figure titles."""
        return self.long_name[:1].upper() + self.long_name[1:]


_OUTPUT_LIST = (
    Variable(
        name="melt_thickness_km",
        units="km",
        long_name="melt thickness (column-integrated melt fraction)",
        style="melt",
        zero_means_no_melt=True,
    ),
    Variable(
        name="onset_depth_km",
        units="km",
        long_name="onset depth of melting below the seafloor (where the column melts)",
        style="depth",
        undefined_without_melt=True,
    ),
    Variable(
        name="onset_pressure_gpa",
        units="GPa",
        long_name="onset pressure of melting (where the column melts)",
        style="depth",
        undefined_without_melt=True,
    ),
    Variable(
        name="melting_top_km",
        units="km",
        long_name="top of the melting column (lid, geotherm or crust base)",
        style="depth",
        undefined_without_melt=True,
    ),
    Variable(
        name="max_melt_fraction",
        units="1",
        long_name="melt fraction at the top of the melting column",
        style="fraction",
        zero_means_no_melt=True,
    ),
    Variable(
        name="mean_melt_pressure_gpa",
        units="GPa",
        long_name="melt-fraction-weighted mean pressure of melting",
        style="depth",
        undefined_without_melt=True,
    ),
    Variable(
        name="excess_to_melt_k",
        units="K",
        long_name="thermal anomaly at which melting would begin beneath this lid",
        style="excess",
    ),
    Variable(
        name="anomaly_melt_thickness_km",
        units="km",
        long_name="melt thickness added by the thermal anomaly (above that of ambient mantle)",
        style="melt",
        zero_means_no_melt=True,
        # the table's stated accuracy on melt thickness (docs/physics.md, "The fast table";
        # tests/test_table.py): an added melt thinner than that cannot be told from none
        negligible_below=0.02,
    ),
    Variable(
        name="melting_regime",
        units="1",
        long_name=(
            "melting regime (0 no melting, 1 ambient mantle only, 2 ambient mantle melts and "
            "the anomaly adds, 3 the anomaly only)"
        ),
        style="regime",
        categorical=True,
        classes=(
            VariableClass(0, "no_melting", "no melting"),
            VariableClass(
                1, "ambient_only", "ambient mantle only (ridge-like; the anomaly adds no melt)"
            ),
            VariableClass(2, "ambient_and_anomaly", "ambient mantle melts and the anomaly adds"),
            VariableClass(3, "anomaly_only", "the anomaly only (ambient mantle does not melt)"),
        ),
    ),
    Variable(
        name="crustal_thickness_km",
        units="km",
        long_name="crustal thickness equivalent of the melt (melt thickness x solid/crust density)",
        style="melt",
        zero_means_no_melt=True,
        default=False,
    ),
    Variable(
        name="deep_melt_share",
        units="1",
        long_name=(
            "share of the melt thickness made beyond the melting model's calibrated pressure "
            "(extrapolated phase relations)"
        ),
        style="share",
        undefined_without_melt=True,
    ),
    Variable(
        name="solidus_crossing_depth_km",
        units="km",
        long_name=(
            "depth at which the solid isentrope crosses the solidus, whatever the lid "
            "(the onset of melting if nothing stopped it)"
        ),
        style="depth",
        default=False,
    ),
    Variable(
        name="melt_production_mm_yr",
        units="mm/yr",
        long_name="melt production rate (rock-equivalent melt volume per area and time)",
        style="production",
        zero_means_no_melt=True,
        needs="upwelling",
    ),
)

_INPUT_LIST = (
    Variable(
        name="plate_age_ma",
        units="Ma",
        long_name="plate age",
        kind="input",
        style="age",
        workflow_key="plate_age",
        valid_range=(0.0, 400.0),
        advice=(
            "Ma; the oldest ocean floor is about 200 Ma (from memory). Values in years: divide "
            "by 1e6; in seconds: divide by 3.15576e13"
        ),
    ),
    Variable(
        name="lid_thickness_km",
        units="km",
        long_name="lid (lithosphere) thickness given as input",
        kind="input",
        style="depth",
        workflow_key="lid_thickness",
        valid_range=(0.0, 400.0),
        advice="km below the seafloor. Values in metres: divide by 1000",
    ),
    Variable(
        name="thermal_anomaly_k",
        units="K",
        long_name="thermal anomaly above the ambient potential temperature",
        kind="input",
        style="anomaly",
        workflow_key="thermal_anomaly",
        valid_range=(-1000.0, 1000.0),
        advice=(
            "K above the ambient potential temperature (plumes are typically 100-300 K, from "
            "memory). If the grid holds absolute Tp, subtract the ambient Tp "
            "(model.ambient_potential_temperature_c)"
        ),
    ),
    Variable(
        name="water_wt_pct",
        units="wt%",
        long_name="water in the bulk source",
        kind="input",
        style="water",
        workflow_key="water",
        valid_range=(0.0, 5.0),
        advice=(
            "wt% of the bulk source (MORB sources hold about 0.01 wt% = 100 ppm, from memory). "
            "Values in ppm: divide by 10000"
        ),
    ),
    Variable(
        name="upwelling_mm_yr",
        units="mm/yr",
        long_name="solid mantle upwelling velocity",
        kind="input",
        style="production",
        workflow_key="upwelling",
        valid_range=(0.0, 2000.0),
        advice=(
            "mm/yr of upward solid flow (ridges: about half the spreading rate, 10-100 mm/yr; "
            "plume stems up to a few hundred mm/yr; common practice, from memory). Values in "
            "m/yr: multiply by 1000; in cm/yr: multiply by 10; in m/s: multiply by 3.15576e10"
        ),
    ),
)

#: Outputs of a history through time (a workflow's ``[motion]`` table; lidmelt.motion._history
#: defines them): written beside the kernel's outputs, never computed by the kernel itself.
_HISTORY_LIST = (
    Variable(
        name="peak_melt_thickness_km",
        units="km",
        long_name="largest melt thickness the cell received over the history",
        kind="history",
        style="melt",
        zero_means_no_melt=True,
    ),
    Variable(
        name="peak_melt_time_ma",
        units="Ma",
        long_name="time of the largest melt thickness (before present; NaN: never melted)",
        kind="history",
        style="history_time",
    ),
    Variable(
        name="peak_anomaly_melt_thickness_km",
        units="km",
        long_name="largest melt thickness added by the thermal anomaly over the history",
        kind="history",
        style="melt",
        zero_means_no_melt=True,
    ),
    Variable(
        name="peak_anomaly_melt_time_ma",
        units="Ma",
        long_name=(
            "time of the largest melt added by the thermal anomaly (before present; NaN: it "
            "never reached the melting duration's threshold)"
        ),
        kind="history",
        style="history_time",
    ),
    Variable(
        name="melting_duration_myr",
        units="Myr",
        long_name="time during which the melt the thermal anomaly adds reached the threshold",
        kind="history",
        style="duration",
        zero_means_no_melt=True,
    ),
    Variable(
        name="integrated_melt_production_km",
        units="km",
        long_name="melt produced over the history (time integral of the melt production)",
        kind="history",
        style="melt",
        zero_means_no_melt=True,
        needs="upwelling",
    ),
)

#: The validity bit flags (uint8; bit meanings in :data:`lidmelt.physics.FLAG_MEANINGS`).
FLAG_VARIABLE = Variable(
    name="validity_flag", units="1", long_name="validity bit flags", kind="flag", style="flag"
)
#: Nodata value of the flag grid (outside the data; the bits themselves use 1, 2, 4, 8).
FLAG_NODATA = 255

#: Output variables computed by the kernel, in file order.
OUTPUTS: dict[str, Variable] = {v.name: v for v in _OUTPUT_LIST}
#: Aligned inputs written to the run directory as ``input_<name>.tif``.
INPUTS: dict[str, Variable] = {v.name: v for v in _INPUT_LIST}
#: Outputs written when the workflow does not list them (needing no optional input).
DEFAULT_OUTPUTS: tuple[str, ...] = tuple(v.name for v in _OUTPUT_LIST if v.default and not v.needs)
#: Outputs of a history through time (``[motion]``), in file order.
HISTORY: dict[str, Variable] = {v.name: v for v in _HISTORY_LIST}
#: Every variable by name.
VARIABLES: dict[str, Variable] = {
    **OUTPUTS, **HISTORY, **INPUTS, FLAG_VARIABLE.name: FLAG_VARIABLE
}  # fmt: skip


#: What a probability of melting is of (its basis): the melt the thermal anomaly adds (the
#: screening's default basis) or all melt, each by the output variable it compares.
PROBABILITY_BASES: dict[str, str] = {
    "anomaly": "anomaly_melt_thickness_km",
    "total": "melt_thickness_km",
}
#: The basis and threshold of an ensemble's probability by default: the melt the anomaly adds
#: reaching 1 km (docs/workflow.md, [ensemble], says why 1 km).
DEFAULT_PROBABILITY_BASIS = "anomaly"
DEFAULT_PROBABILITY_THRESHOLD_KM = 1.0
_BASIS_TEXT = {"anomaly": "the melt the thermal anomaly adds", "total": "the melt thickness"}
_PROBABILITY = re.compile(
    r"^melt_probability_(?P<basis>[a-z]+)_ge_(?P<t>[0-9]+(?:\.[0-9]+)?(?:e[-+]?[0-9]+)?)km"
    r"(?P<weighted>_weighted)?$"
)
_LEGACY_PROBABILITY = re.compile(r"^melt_probability(?:_ge_[0-9.e+-]+km)?$")


@dataclass(frozen=True)
class EnsembleName:
    """What the name of an ensemble output says.

    ``kind``: ``"probability"`` (``basis`` of :data:`PROBABILITY_BASES`, ``base`` its variable,
    ``threshold_km``), ``"weighted_probability"`` (the same, its members weighted by their
    agreement with known features: :func:`weighted_probability_name`), ``"percentile"``
    (``base`` the output, ``percentile`` 0-100) or ``"count"`` (:data:`MEMBERS_WITHOUT_VALUE`).
    """

    kind: str
    base: str = ""
    basis: str = ""
    threshold_km: float | None = None
    percentile: float | None = None


def probability_name(basis: str, threshold_km: float) -> str:
    """``melt_probability_<basis>_ge_<T>km`` (T as ``%g``): the probability that a member's melt
    of ``basis`` reaches ``threshold_km`` km, e.g. ``melt_probability_anomaly_ge_1km``."""
    return f"melt_probability_{basis}_ge_{float(threshold_km):g}km"


def weighted_probability_name(basis: str, threshold_km: float) -> str:
    """``melt_probability_<basis>_ge_<T>km_weighted``: the probability of
    :func:`probability_name` with each member weighted by its score against known features
    (``[assess]``; :mod:`lidmelt.ensemble._posterior`)."""
    return probability_name(basis, threshold_km) + "_weighted"


def percentile_name(base: str, q: float) -> str:
    """``<output>_p<q>`` (q as ``%g``), e.g. ``melt_thickness_km_p90``."""
    return f"{base}_p{float(q):g}"


def parse_ensemble_name(name: str) -> EnsembleName | None:
    """The meaning of an ensemble output's name, or None for any other name (an ensemble run
    of an earlier lidmelt, ``melt_probability``, is not one: :func:`is_legacy_probability`)."""
    if name == MEMBERS_WITHOUT_VALUE.name:
        return EnsembleName("count")
    match = _PROBABILITY.match(name)
    if match and match["basis"] in PROBABILITY_BASES:
        basis = match["basis"]
        base = PROBABILITY_BASES[basis]
        kind = "weighted_probability" if match["weighted"] else "probability"
        return EnsembleName(kind, base=base, basis=basis, threshold_km=float(match["t"]))
    base, sep, q = name.rpartition("_p")
    if sep and base in OUTPUTS and q.replace(".", "", 1).isdigit() and float(q) <= 100.0:
        return EnsembleName("percentile", base=base, percentile=float(q))
    return None


def is_legacy_probability(name: str) -> bool:
    """Whether ``name`` is a probability map of an ensemble run made before probabilities had a
    basis (``melt_probability``: melt thickness > 0; ``melt_probability_ge_<T>km``)."""
    return bool(_LEGACY_PROBABILITY.match(name))


#: Outputs an earlier lidmelt wrote under another name: the old name -> the name now.
RENAMED_OUTPUTS: dict[str, str] = {"lid_depth_km": "melting_top_km"}


def legacy_message(name: str) -> str | None:
    """The one text of every error about ``name``, an output of an earlier lidmelt renamed since
    (:data:`RENAMED_OUTPUTS`, or its ``_p<q>``) or a probability map of no basis; else None."""
    base, sep, q = name.rpartition("_p")
    now = RENAMED_OUTPUTS[base] + sep + q if sep and base in RENAMED_OUTPUTS else None
    if (now := now or RENAMED_OUTPUTS.get(name)) is not None:
        return (
            f"{name!r} is the name an earlier lidmelt gave the {get_variable(now).long_name}; it "
            f"is now {now!r} (the GeoTIFF {now}.tif, the NetCDF variable {now}). Write {now!r}, "
            "and run 'lidmelt run' again on a run folder made by an earlier lidmelt."
        )
    if not is_legacy_probability(name):
        return None
    return (
        f"{name!r} is a probability map of an ensemble run made by an earlier lidmelt (of any "
        f"melt, no basis); they are now named {probability_name('anomaly', 1)} (basis 'anomaly' "
        "or 'total', threshold in km). Run 'lidmelt run' on the ensemble workflow again."
    )


#: The probability of melting by default (a template: each basis and threshold has its own name,
#: :func:`probability_name`; :func:`ensemble_variable` gives its Variable).
MELT_PROBABILITY = Variable(
    name=probability_name(DEFAULT_PROBABILITY_BASIS, DEFAULT_PROBABILITY_THRESHOLD_KM),
    units="1",
    long_name="probability that the melt the thermal anomaly adds is at least 1 km",
    kind="ensemble",
    style="probability",
)
#: Per cell, the fraction of the ensemble members without a value there although the cell has
#: input data (no solidus crossing, an invalid input): left out of the cell's probabilities and
#: percentiles.
MEMBERS_WITHOUT_VALUE = Variable(
    name="members_without_value_fraction",
    units="1",
    long_name=(
        "fraction of the ensemble members without a value (left out of the probabilities and "
        "percentiles)"
    ),
    kind="ensemble",
    style="member_fraction",
)


def ordinal(q: float) -> str:
    """``10`` -> ``"10th"``, ``2`` -> ``"2nd"``, ``2.5`` -> ``"2.5th"`` (English ordinals)."""
    text = f"{q:g}"
    if not float(q).is_integer():
        return f"{text}th"
    n = int(q)
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{text}{suffix}"


def probability_long_name(basis: str, threshold_km: float) -> str:
    """``"probability that the melt the thermal anomaly adds is at least 1 km"``."""
    return f"probability that {_BASIS_TEXT[basis]} is at least {float(threshold_km):g} km"


def ensemble_variable(name: str) -> Variable | None:
    """The Variable of an ensemble output name (:func:`parse_ensemble_name`), or None.

    A probability (:func:`probability_name`) is dimensionless with the ``"probability"`` style;
    a percentile ``<output>_p<q>`` keeps its output's unit and style;
    ``members_without_value_fraction`` is a fraction of the members.
    """
    if (parsed := parse_ensemble_name(name)) is None:
        return None
    if parsed.kind == "count":
        return MEMBERS_WITHOUT_VALUE
    if parsed.kind in ("probability", "weighted_probability"):
        long_name = probability_long_name(parsed.basis, parsed.threshold_km)
        if parsed.kind == "weighted_probability":
            long_name += ", members weighted by their score against the known features"
        return replace(MELT_PROBABILITY, name=name, long_name=long_name)
    var = OUTPUTS[parsed.base]
    plain = var.long_name.split(" (")[0]
    long_name = f"{plain}, {ordinal(parsed.percentile)} percentile of the ensemble"
    return replace(var, name=name, long_name=long_name, kind="ensemble", default=False)


def get_variable(name: str) -> Variable:
    """The registered variable ``name`` (or an ensemble output, :func:`ensemble_variable`);
    an :class:`InputError` listing the names otherwise."""
    if (derived := ensemble_variable(name)) is not None:
        return derived
    if legacy := legacy_message(name):
        raise InputError(legacy)
    if name not in VARIABLES:
        msg = (
            f"unknown variable {name!r}; lidmelt knows {', '.join(VARIABLES)}. "
            "Check the spelling (the unit is part of the name)."
        )
        raise InputError(msg)
    return VARIABLES[name]


def default_outputs(given_inputs) -> tuple[str, ...]:
    """The outputs written by default when the workflow inputs ``given_inputs`` (workflow keys)
    are given: every default output whose needed input is among them, in file order."""
    given = set(given_inputs)
    return tuple(v.name for v in _OUTPUT_LIST if v.default and (not v.needs or v.needs in given))


def input_for_workflow_key(key: str) -> Variable:
    """The input variable named ``[inputs.<key>]`` in a workflow (``plate_age``, ``water``, ...)."""
    for var in INPUTS.values():
        if var.workflow_key == key:
            return var
    known = ", ".join(v.workflow_key for v in INPUTS.values())
    msg = f"unknown input {key!r}; the inputs are {known}."
    raise InputError(msg)


def check_input_range(block: np.ndarray, name: str, source: str) -> np.ndarray:
    """``block`` of input ``name`` unchanged, or an :class:`InputError` for values outside
    the variable's physical range (:attr:`Variable.valid_range`); ``source`` names its file."""
    var = INPUTS[name]
    lo, hi = var.valid_range
    with np.errstate(invalid="ignore"):
        bad = (block < lo) | (block > hi)
    if bad.any():
        values = block[bad]
        msg = (
            f"{name} from {source} has values from {np.nanmin(values):.6g} to "
            f"{np.nanmax(values):.6g}, outside {lo:g} to {hi:g}: expected {var.advice}. "
            "Fix the grid's units (or its nodata value) and run again."
        )
        raise InputError(msg)
    return block
