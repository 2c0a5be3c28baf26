"""Where each parameter of the melting models comes from (shown by ``describe`` and stored
with every run): a published table, common practice, a value from memory, or lidmelt's choice.

A value recalled from memory whose publication could not be read (docs/sources.md says what was
tried) is marked "from memory, not checked against the publication" (:data:`NOT_CHECKED`), so
that the run's summary and report say so plainly."""

from __future__ import annotations

#: The mark of a value recalled from memory and not checked against its publication.
NOT_CHECKED = "from memory, not checked against the publication"

#: Sources of the parameters every model shares by lidmelt's definition.
_DEFINITION_SOURCES = {
    "lithostatic_density_kg_m3": "lidmelt definition above 7.25 GPa (PREM below), common practice",
    "gravity_m_s2": "lidmelt definition above 7.25 GPa (PREM below), common practice",
}


def _sources(*groups: tuple[tuple[str, ...], str], **single: str) -> dict[str, str]:
    """Per-parameter sources: each group gives one source to several parameters."""
    out = dict(_DEFINITION_SOURCES)
    for names, source in groups:
        out.update(dict.fromkeys(names, source))
    out.update(single)
    return out


KATZ_SOURCES = _sources(
    (
        (
            "solidus_a1_c",
            "solidus_a2_c_gpa",
            "solidus_a3_c_gpa2",
            "lherzolite_liquidus_b1_c",
            "lherzolite_liquidus_b2_c_gpa",
            "lherzolite_liquidus_b3_c_gpa2",
            "liquidus_c1_c",
            "liquidus_c2_c_gpa",
            "liquidus_c3_c_gpa2",
            "cpx_reaction_r0",
            "cpx_reaction_r1_gpa",
            "beta1",
            "beta2",
            "water_depression_k_c",
            "water_depression_gamma",
            "water_partition_coefficient",
            "saturation_chi1_wt_pct",
            "saturation_chi2_wt_pct_gpa",
            "saturation_lambda",
            "specific_heat_j_kg_k",
            "entropy_of_melting_j_kg_k",
        ),
        "Katz et al. 2003, Table 2 (verified secondary)",
    ),
    (
        ("solid_expansivity_k", "melt_expansivity_k", "solid_density_kg_m3", "melt_density_kg_m3"),
        f"Katz et al. 2003, Table 2 ({NOT_CHECKED})",
    ),
    cpx_mass_fraction=f"Katz et al. 2003, fertile lherzolite ({NOT_CHECKED})",
    max_onset_pressure_gpa=(
        "the upper mantle's floor: PREM's pressure at its 400 km discontinuity, 13.35 GPa "
        "(Dziewonski & Anderson 1981, Table II; verified secondary)"
    ),
    calibrated_max_pressure_gpa=(
        f"onsets beyond ~7 GPa extrapolate the experiments of Katz et al. 2003 ({NOT_CHECKED})"
    ),
)

MB1988_SOURCES = _sources(
    (
        (
            "solidus_s0_c",
            "solidus_s1_c_gpa",
            "solidus_s2_gpa",
            "solidus_s3_per_c",
            "liquidus_l0_c",
            "liquidus_l1_c_gpa",
            "liquidus_l2_c",
            "liquidus_l3_gpa",
            "fraction_a0",
            "fraction_a1",
        ),
        "McKenzie & Bickle 1988 (from memory)",
    ),
    (
        (
            "specific_heat_j_kg_k",
            "entropy_of_melting_j_kg_k",
            "solid_expansivity_k",
            "melt_expansivity_k",
            "solid_density_kg_m3",
            "melt_density_kg_m3",
        ),
        "McKenzie & Bickle 1988 (from memory, low confidence)",
    ),
    max_onset_pressure_gpa=(
        "the upper mantle's floor, as for Katz 2003: PREM's pressure at 400 km, 13.35 GPa "
        "(Dziewonski & Anderson 1981, Table II; verified secondary)"
    ),
    calibrated_max_pressure_gpa="lidmelt choice, as for Katz 2003 (from memory)",
)
