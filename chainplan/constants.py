"""Physical constants (exact SI values since the 2019 redefinition; CODATA 2018)."""
from __future__ import annotations

#: Boltzmann constant, J/K (CODATA 2018, exact since the 2019 SI redefinition).
K_BOLTZMANN = 1.380649e-23
#: Elementary charge, C (CODATA 2018, exact).
Q_ELECTRON = 1.602176634e-19
