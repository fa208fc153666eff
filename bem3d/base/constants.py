"""Physical constants and length units: the one place each is defined."""

#: Vacuum permittivity in F/m (CODATA 2022).
EPS0 = 8.8541878188e-12

#: Mesh length units accepted at the door, in metres.
LENGTH_UNITS = {
    "m": 1.0,
    "cm": 1e-2,
    "mm": 1e-3,
    "um": 1e-6,
    "in": 0.0254,
    "mil": 0.0254e-3,
}
