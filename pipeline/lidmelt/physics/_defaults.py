"""Defaults of the physics that callers share (the workflow's and the column command's)."""

#: Default lid-base isotherm [deg C]: 1100 C is a common choice for the base of the thermal
#: lithosphere (common practice, no single source). How much the choice matters depends on the
#: cooling model: at 100 Ma the 1100 C isotherm lies at 69 km in the GDH1 plate and 113 km in
#: the default half-space [derived; docs/physics.md, section "Lithosphere from plate age"].
DEFAULT_LID_ISOTHERM_C = 1100.0
#: Default cooling model: half-space cooling with Turcotte & Schubert constants.
DEFAULT_COOLING = "half-space"
#: Default ambient potential temperature [deg C] (Herzberg, Condie & Korenaga 2010, EPSL 292,
#: 79: 1350 C for the present MORB source).
DEFAULT_AMBIENT_TP_C = 1350.0
