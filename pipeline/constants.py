"""Physical constants, defined once (CODATA values, from scipy.constants).

Kernels import them too: numba freezes a module-level float as a compile-time constant.
"""

from __future__ import annotations

import math

from scipy import constants as _codata

C = _codata.c  # speed of light, m/s
EPSILON_0 = _codata.epsilon_0  # vacuum permittivity, F/m
COULOMB = 1.0 / (4.0 * math.pi * EPSILON_0)  # the q/(4πε0) factor, V·m/C
EPS0_C = EPSILON_0 * C  # ε0·c: energy flux per |E|², J/(m²·s)/(V/m)²
