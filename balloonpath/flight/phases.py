"""Flight phase codes shared by the vertical model, the integrator and the outputs."""

ASCENT = 0
FLOAT = 1
DESCENT = 2
LANDED = 3
PHASE_NAMES = ("ascent", "float", "descent", "landed")
