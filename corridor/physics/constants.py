"""Physical constants used by the physics core (SI units)."""

import math

#: Permeability of free space [H/m] (classical defined value, CODATA before 2019).
MU0_H_PER_M = 4e-7 * math.pi
#: Permittivity of free space [F/m] (CODATA 2018).
EPS0_F_PER_M = 8.8541878128e-12
#: Euler–Mascheroni constant γ [-] (appears in Carson's series and De).
EULER_GAMMA = 0.5772156649015329
