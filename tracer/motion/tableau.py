"""The Dormand–Prince 5(4) pair as data.

Dormand & Prince (1980), "A family of embedded Runge-Kutta formulae", J. Comput. Appl. Math. 6,
19-26, table 2 ("RK5(4)7M"): nodes ``DP_C``, coefficients ``DP_A`` (row i = stage i), fifth-order
weights ``DP_B`` (equal to the last row of ``DP_A``: the first same as last property), embedded
fourth-order weights ``DP_B_HAT`` and ``DP_E = DP_B - DP_B_HAT``. The continuous extension's
weights ``DP_D`` are Shampine's (1986, "Some practical Runge-Kutta formulas", Math. Comp. 46,
135-150) in the form of Hairer, Nørsett & Wanner (Solving Ordinary Differential Equations I, 2nd
ed., 1993, sec. II.6, the "dense" weights of DOPRI5).
"""

import numpy as np

DP_C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0, 1.0])
DP_A = np.array([
    [0.0, 0.0, 0.0, 0.0, 0.0, 0.0],
    [1 / 5, 0.0, 0.0, 0.0, 0.0, 0.0],
    [3 / 40, 9 / 40, 0.0, 0.0, 0.0, 0.0],
    [44 / 45, -56 / 15, 32 / 9, 0.0, 0.0, 0.0],
    [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729, 0.0, 0.0],
    [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656, 0.0],
    [35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84],
])
DP_B = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84, 0.0])
DP_B_HAT = np.array([5179 / 57600, 0.0, 7571 / 16695, 393 / 640, -92097 / 339200, 187 / 2100, 1 / 40])
DP_E = DP_B - DP_B_HAT
DP_D = np.array([-12715105075 / 11282082432, 0.0, 87487479700 / 32700410799,
                 -10690763975 / 1880347072, 701980252875 / 199316789632,
                 -1453857185 / 822651844, 69997945 / 29380423])
