"""Physical constants (exact SI values since the 2019 redefinition; CODATA 2018)."""
from __future__ import annotations

#: Boltzmann constant, J/K (CODATA 2018, exact since the 2019 SI redefinition).
K_BOLTZMANN = 1.380649e-23
#: Elementary charge, C (CODATA 2018, exact).
Q_ELECTRON = 1.602176634e-19
#: Vacuum permittivity, F/m (CODATA 2018; no longer exact in the 2019 SI, 1.5e-10 relative uncertainty).
EPS_0 = 8.8541878128e-12
#: Permittivity of silicon dioxide, F/m: relative permittivity 3.9 (Sze, *Physics of Semiconductor
#: Devices*, from memory; the value SPICE's MOSFET models take for Cox = εox/TOX).
EPS_OX = 3.9 * EPS_0
