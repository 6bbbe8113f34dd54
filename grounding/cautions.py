"""The cautions every output carries."""

CAUTIONS = (
    "Preliminary study aid only; it is not a design approval.",
    "Results must be reviewed by a licensed professional engineer and checked against the local codes "
    "and the utility's practice before any design decision.",
    "Soil and fault data dominate the answer: the grid resistance scales with the soil resistivity and "
    "every voltage with the grid current; verify both before relying on the result.",
)
