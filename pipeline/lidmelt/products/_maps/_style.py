"""How each variable is drawn: colour maps per style key, no-melt classes, colour limits.

The presentation registry is kept apart from the drawing code. Every variable of
:mod:`lidmelt._variables` names a style key (:attr:`lidmelt._variables.Variable.style`); this
module gives each key a :class:`MapStyle` (its colour map) in :data:`STYLES`, and
:func:`style_for` combines it with the registry's facts about the variable (its title, whether 0
or NaN means "no melting") into the :class:`VariableStyle` the figure code uses.

Colours: nodata is a neutral light grey (:data:`NODATA_COLOR`); in the variables whose 0 means
"no melting" (``melt_thickness_km``, ``max_melt_fraction``) a zero cell is white
(:data:`ZERO_COLOR`), so it differs both from nodata and from the lowest colour of the scale
(the smallest non-zero melt); in the variables that are undefined where nothing melts
(``onset_depth_km``, ``onset_pressure_gpa``, ``mean_melt_pressure_gpa``, and ``melting_top_km``
where a column meets its geotherm nowhere), cells where
``melt_thickness_km`` is 0 are white too. Colour limits are the 2nd and 98th percentiles of the
valid cells (:data:`PERCENTILES`; for the two melt amounts: 0 to the 99.5th percentile of the
melting cells, :data:`MELT_TOP_PERCENTILE`, so that the few hot plume cells keep their
structure), with extend arrows where the data go beyond them. Depths and pressures span the
whole range of the valid cells (:data:`FULL_RANGE`): their plume cores are few cells, and a
percentile limit would saturate a 250 km onset and a 150 km one into one colour; so does the
thermal anomaly (a 98th-percentile limit drew plumes of 150 and 280 K in one colour). They use
``cividis_r``: shallow is light, deep is dark. Sequential colour maps are matplotlib's
perceptually uniform ones (viridis family; common practice).

Signed quantities whose zero means something (``excess_to_melt_k``: 0 is the screening line
between mantle that melts at the ambient temperature and mantle that needs an anomaly) use the
diverging ``RdBu_r`` (ColorBrewer, Harrower & Brewer 2003, from memory), with limits symmetric
about zero (the larger magnitude of the 2nd and 98th percentiles) and the zero contour drawn.

Categorical variables (``melting_regime``) have a style with :attr:`MapStyle.classes`: each
class value gets one colour and a legend entry (its label from the registry,
:attr:`lidmelt._variables.Variable.classes`), and no colour bar is drawn. The regime colours are
white (no melting, as in the other maps) and the blue, reddish purple and vermillion of the
colour-blind safe palette of Okabe & Ito (2008), "Color Universal Design" (distinct for the
common forms of colour-vision deficiency). Melt production (``melt_production_mm_yr``) is sequential
(``plasma``, whose light end is yellow, not white: the white "no melting" class stays distinct;
magma and inferno end near white), with 0 drawn as "no melting".

Probabilities of an ensemble run (style ``"probability"``) have a scale of their own with fixed
limits 0 and 1 and the 0.5 contour drawn (:mod:`._probability`); the share of the members without
a value (style ``"member_fraction"``) the same fixed limits; the ensemble's percentile maps
(``melt_thickness_km_p90``, ...) take their base variable's style
(:func:`lidmelt.products._ensemble.variable_of`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from matplotlib.colors import BoundaryNorm, ListedColormap, Normalize, to_rgba_array
from matplotlib.patches import Patch

from lidmelt._variables import OUTPUTS
from lidmelt.products._ensemble import PROBABILITY_STYLE, variable_of
from lidmelt.products._maps._probability import (
    PROBABILITY_CMAP,
    PROBABILITY_CONTOURS,
    PROBABILITY_LIMITS,
    extend_of,
)

#: Colour of nodata cells inside the grid (neutral light grey).
NODATA_COLOR = "#c8c8c8"
#: Colour of the map background outside the grid (a pale blue-grey, distinct from nodata).
OUTSIDE_COLOR = "#e6edf3"
#: Colour of cells with exactly zero melt in the melt-amount variables.
ZERO_COLOR = "#ffffff"
#: Outline colour of candidate regions.
CANDIDATE_COLOR = "#d62728"
#: Percentiles of the valid cells that set the colour limits (robust limits, common practice).
PERCENTILES = (2.0, 98.0)
#: Top of the colour scale of the melt amounts: this percentile of the melting cells.
MELT_TOP_PERCENTILE = 99.5
#: Percentiles of the styles that show the whole range (depths, pressures, thermal anomaly).
FULL_RANGE = (0.0, 100.0)


@dataclass(frozen=True)
class ClassStyle:
    """One class of a categorical variable: its value, colour and legend text."""

    value: int
    color: str
    label: str


@dataclass(frozen=True)
class MapStyle:
    """The look shared by every variable with one style key.

    Parameters
    ----------
    cmap : str
        Name of a perceptually uniform matplotlib colour map (unused by categorical styles).
    zero_is_no_melt : bool
        0 means "no melting" for every variable of this key, whatever the registry says.
    classes : tuple of ClassStyle
        The classes of a categorical variable (drawn with a legend, no colour bar).
    diverging : bool
        A signed quantity: limits symmetric about 0, and the zero contour drawn.
    percentiles : (low, high)
        Percentiles of the valid cells that set the colour limits.
    limits : (low, high) or None
        Fixed colour limits (probabilities: 0 and 1) instead of percentiles.
    contours : tuple of float
        Levels drawn as labelled contours (probabilities: 0.5).
    """

    cmap: str
    zero_is_no_melt: bool = False
    classes: tuple[ClassStyle, ...] = ()
    diverging: bool = False
    percentiles: tuple[float, float] = PERCENTILES
    limits: tuple[float, float] | None = None
    contours: tuple[float, ...] = ()
    nan_with_data_is_no_melt: bool = False  # a history's times: NaN where a cell never melted


#: Colours of the ``melting_regime`` classes by their registry key: white (no melting), then
#: from Okabe & Ito (2008) blue (ambient mantle only), reddish purple (ambient melts and the
#: anomaly adds: between the two) and vermillion (the anomaly only).
_REGIME_COLORS = {
    "no_melting": ZERO_COLOR,
    "ambient_only": "#0072B2",
    "ambient_and_anomaly": "#CC79A7",
    "anomaly_only": "#D55E00",
}
#: The classes of ``melting_regime``: values and labels from the registry, colours above.
REGIME_CLASSES = tuple(
    ClassStyle(c.value, _REGIME_COLORS[c.key], c.label) for c in OUTPUTS["melting_regime"].classes
)


#: Map style per style key (:attr:`lidmelt._variables.Variable.style`).
STYLES: dict[str, MapStyle] = {
    "melt": MapStyle("viridis", zero_is_no_melt=True),  # melt amounts: 0 is no melting
    "depth": MapStyle("cividis_r", percentiles=FULL_RANGE),  # shallow light, deep dark
    "fraction": MapStyle("plasma"),
    # a share of the melt (deep_melt_share): fixed limits 0 and 1, so that maps compare
    "share": MapStyle("plasma", limits=(0.0, 1.0)),
    "excess": MapStyle("RdBu_r", diverging=True),  # signed: 0 is the screening line
    "age": MapStyle("viridis"),
    "anomaly": MapStyle("inferno", percentiles=FULL_RANGE),  # every plume's peak resolved
    "water": MapStyle("cividis"),
    "flag": MapStyle("viridis"),  # the validity flags are not drawn by 'lidmelt map'
    "regime": MapStyle("viridis", classes=REGIME_CLASSES),
    "production": MapStyle("plasma", zero_is_no_melt=True),  # no near-white end (0 is white)
    PROBABILITY_STYLE: MapStyle(
        PROBABILITY_CMAP, limits=PROBABILITY_LIMITS, contours=PROBABILITY_CONTOURS
    ),
    # a share of the ensemble's members (those without a value): fixed 0 to 1, like probability
    "member_fraction": MapStyle("cividis", limits=PROBABILITY_LIMITS),
    # times of a history's peaks (Ma before present): the whole range, so the age progression
    # along a hotspot track shows from its youngest to its oldest end; NaN: never melted
    "history_time": MapStyle("cividis", percentiles=FULL_RANGE, nan_with_data_is_no_melt=True),
    # how long the melt the anomaly added reached the threshold (Myr): 0 is no such melting
    "duration": MapStyle("viridis", zero_is_no_melt=True),
}
#: Style of a variable the registry does not know, or whose key has no entry.
DEFAULT_STYLE = MapStyle("viridis")
#: Legend text of the no-melt class per variable (default "no melting"): the anomaly melt is
#: the melt the anomaly adds, so its white cells may melt as ambient mantle does.
NO_MELT_LABELS = {
    "anomaly_melt_thickness_km": "no added melt",
    "peak_melt_time_ma": "never melted",
    "peak_anomaly_melt_time_ma": "added melt never reached the threshold",
    "melting_duration_myr": "added melt never reached the threshold",
}

_UNIT_LABELS = {"1": "dimensionless", "": "no unit given", "degC": "°C", "wt%": "wt %"}


@dataclass(frozen=True)
class VariableStyle:
    """How one variable is drawn.

    Parameters
    ----------
    cmap : str
        Name of a perceptually uniform matplotlib colour map.
    zero_is_no_melt : bool
        Cells with value 0 mean "no melting" and are drawn in :data:`ZERO_COLOR`; the colour
        scale then starts at 0 and covers the melting cells only.
    nan_is_no_melt : bool
        The variable is undefined (NaN) where a valid cell does not melt (e.g. onset depth);
        such cells, found from ``melt_thickness_km == 0``, are drawn in :data:`ZERO_COLOR`
        rather than as nodata.
    negligible_below : float
        With ``zero_is_no_melt``: values below this (the registry's
        :attr:`lidmelt._variables.Variable.negligible_below`) are drawn as the no-melt class
        too, like 0 (the file keeps the exact value).
    no_melt_label : str
        Legend text of the no-melt class (:data:`NO_MELT_LABELS`).
    title : str
        Readable name, used when the run gives no long name.
    classes : tuple of ClassStyle
        Non-empty for a categorical variable: drawn class by class, with a legend entry each
        and no colour bar.
    diverging, percentiles, limits, contours, nan_with_data_is_no_melt
        As in :class:`MapStyle` (the last: a NaN cell where the run has data means "no
        melting", e.g. the time of a history's peak where nothing melted).
    """

    cmap: str
    zero_is_no_melt: bool = False
    nan_is_no_melt: bool = False
    negligible_below: float = 0.0
    no_melt_label: str = "no melting"
    title: str = ""
    classes: tuple[ClassStyle, ...] = ()
    diverging: bool = False
    percentiles: tuple[float, float] = PERCENTILES
    limits: tuple[float, float] | None = None
    contours: tuple[float, ...] = ()
    nan_with_data_is_no_melt: bool = False

    @property
    def categorical(self) -> bool:
        """Whether the variable is drawn as classes (a legend) rather than a colour scale."""
        return bool(self.classes)

    def melting(self, values: np.ndarray) -> np.ndarray:
        """Cells drawn on the colour scale of a melt amount: > 0 and not below
        :attr:`negligible_below`."""
        with np.errstate(invalid="ignore"):
            return (values > 0.0) & (values >= self.negligible_below)


def style_for(variable: str) -> VariableStyle:
    """The style of ``variable``: its key's colour map and the registry's facts about it."""
    var = variable_of(variable)
    if var is None:  # not (yet) registered: a plain continuous scale
        return VariableStyle(DEFAULT_STYLE.cmap)
    key = STYLES.get(var.style, DEFAULT_STYLE)
    zero_is_no_melt = (var.zero_means_no_melt or key.zero_is_no_melt) and not key.classes
    label = NO_MELT_LABELS.get(var.name.rpartition("_p")[0] if var.kind == "ensemble" else var.name)
    if label and var.negligible_below > 0.0:
        label += f" (< {var.negligible_below:g} {unit_label(var.units)})"
    return VariableStyle(
        key.cmap,
        zero_is_no_melt=zero_is_no_melt,
        nan_is_no_melt=var.undefined_without_melt,
        negligible_below=var.negligible_below if zero_is_no_melt else 0.0,
        no_melt_label=label or "no melting",
        title=var.title,
        classes=key.classes,
        diverging=key.diverging,
        percentiles=key.percentiles,
        limits=key.limits,
        contours=key.contours,
        nan_with_data_is_no_melt=key.nan_with_data_is_no_melt,
    )


def unit_label(units: str) -> str:
    """Readable text of a unit string for labels (``"1"`` -> ``"dimensionless"``)."""
    return _UNIT_LABELS.get(units, units)


def colorbar_label(long_name: str, units: str) -> str:
    """Colour-bar label: the long name without a trailing parenthesis, then the unit.

    ``"Melt thickness (column-integrated melt fraction)", "km"`` -> ``"Melt thickness (km)"``;
    the full long name stays in the title, so the label never doubles its parenthesis.
    """
    base = long_name.strip()
    if base.endswith(")") and " (" in base:
        base = base[: base.rindex(" (")].rstrip()
    return f"{base} ({unit_label(units)})"


def title_of(variable: str, attrs: dict[str, Any]) -> str:
    """Figure title: the run's long name, else the registry's, else the variable name."""
    name = str(attrs.get("long_name") or "")
    if not name or name == variable:
        name = style_for(variable).title or variable.replace("_", " ")
    return name[:1].upper() + name[1:]


def colour_limits(
    values: np.ndarray,
    *,
    zero_is_no_melt: bool = False,
    diverging: bool = False,
    percentiles: tuple[float, float] = PERCENTILES,
    negligible_below: float = 0.0,
) -> tuple[float, float, str]:
    """Robust colour limits and the matching colour-bar ``extend``.

    Parameters
    ----------
    values : ndarray
        The grid values; NaN is nodata.
    zero_is_no_melt : bool
        For melt amounts: the scale starts at 0 and its top is the 99.5th percentile of the
        positive values only (those not below ``negligible_below``).
    diverging : bool
        For signed quantities: limits ``-m, +m`` with ``m`` the larger magnitude of the two
        percentiles, so that 0 is the centre colour.
    percentiles : (low, high)
        Percentiles of the valid cells (default :data:`PERCENTILES`).

    Returns
    -------
    vmin, vmax : float
        Colour limits (in the variable's unit), vmin < vmax.
    extend : {"neither", "min", "max", "both"}
        Which ends of the colour bar get an arrow because valid values lie beyond the limits.
    """
    finite = np.asarray(values, dtype=float)
    finite = finite[np.isfinite(finite)]
    if finite.size > 4_000_000:  # percentiles of a regular subsample are as robust
        finite = finite[:: finite.size // 4_000_000 + 1]
    if zero_is_no_melt:
        positive = finite[(finite > 0) & (finite >= negligible_below)]
        vmin = 0.0
        vmax = float(np.percentile(positive, MELT_TOP_PERCENTILE)) if positive.size else 1.0
        if vmax <= 0.0:
            vmax = float(positive.max()) if positive.size else 1.0
        below, above = False, bool(positive.size and positive.max() > vmax)
    elif finite.size:
        vmin, vmax = (float(v) for v in np.percentile(finite, percentiles))
        if diverging:
            vmax = max(abs(vmin), abs(vmax)) or 1.0
            vmin = -vmax
        below, above = bool(finite.min() < vmin), bool(finite.max() > vmax)
    else:
        vmin, vmax, below, above = 0.0, 1.0, False, False
    if not vmax > vmin:  # a constant field: open a small window around it
        half = max(abs(vmin) * 0.01, 1e-6)
        vmin, vmax = vmin - half, vmax + half
        below = above = False
    return vmin, vmax, extend_of(below, above)


def end_ticks(vmin: float, vmax: float, nbins: int) -> tuple[list[float], list[str]]:
    """Colour-bar ticks with a labelled tick at each end of the scale, and their labels.

    Round interior ticks (matplotlib's MaxNLocator) are kept where they lie more than 12 % of
    the range from an end, so that no two labels collide; the ends are labelled to 3
    significant figures, the interior ticks as round numbers.
    """
    from matplotlib.ticker import MaxNLocator

    gap = 0.12 * (vmax - vmin)
    inner = [
        float(t)
        for t in MaxNLocator(nbins=nbins).tick_values(vmin, vmax)
        if vmin + gap < t < vmax - gap
    ]
    ticks = [vmin, *inner, vmax]
    labels = [_end_label(vmin), *(f"{t:g}" for t in inner), _end_label(vmax)]
    return ticks, labels


def _end_label(value: float) -> str:
    """A scale's end value to 3 significant figures, without an exponent where it fits."""
    if value == 0:
        return "0"
    text = f"{value:.3g}"
    if "e" in text and 1e-4 <= abs(value) < 1e6:
        text = f"{value:.6f}".rstrip("0").rstrip(".") if abs(value) < 1 else f"{value:.0f}"
    return text


def encode_classes(
    values: np.ndarray, cmap: Any, vmin: float, vmax: float, no_melt: np.ndarray | None
) -> tuple[np.ndarray, Any, Any]:
    """Values, colour map and norm that draw nodata, no-melt and the scale without NaN.

    The drawn colour map is the variable's 256 colours with :data:`ZERO_COLOR` before them
    and :data:`NODATA_COLOR` after them; each class gets a value inside its own bin. No NaN
    or masked cell reaches cartopy, whose wrapped meshes (global maps) can paint masked
    cells with a data colour (seen with cartopy 0.26).
    """
    n = 256
    lut = cmap.resampled(n)(np.linspace(0.0, 1.0, n))
    colours = np.vstack([to_rgba_array([ZERO_COLOR]), lut, to_rgba_array([NODATA_COLOR])])
    listed = ListedColormap(colours).with_extremes(bad="none")
    d = (vmax - vmin) / n
    norm = Normalize(vmin=vmin - d, vmax=vmax + d)
    # below/above the limits: the end colours (half a bin inside, clear of the class edges)
    out = np.clip(values, vmin + 0.5 * d, vmax - 0.5 * d)
    out[~np.isfinite(values)] = vmax + 0.5 * d
    if no_melt is not None:
        out[no_melt] = vmin - 0.5 * d
    return out, listed, norm


def encode_categories(
    values: np.ndarray, classes: tuple[ClassStyle, ...]
) -> tuple[np.ndarray, Any, Any]:
    """Values, colour map and norm that draw each class in its colour and the rest as nodata.

    Class ``i`` (in the order of ``classes``) is drawn as the value ``i``; NaN and any value
    that is not a class value get :data:`NODATA_COLOR` (no NaN reaches cartopy, as in
    :func:`encode_classes`).
    """
    values = np.asarray(values, dtype=float)
    n = len(classes)
    out = np.full(values.shape, float(n))
    for i, item in enumerate(classes):
        out[values == item.value] = float(i)
    colours = to_rgba_array([c.color for c in classes] + [NODATA_COLOR])
    listed = ListedColormap(colours).with_extremes(bad="none")
    return out, listed, BoundaryNorm(np.arange(n + 2) - 0.5, n + 1)


def class_legend_handles(classes: tuple[ClassStyle, ...]) -> list[Any]:
    """One legend patch per class of a categorical variable (none for a continuous one)."""
    return [Patch(facecolor=c.color, edgecolor="0.3", lw=0.5, label=c.label) for c in classes]
