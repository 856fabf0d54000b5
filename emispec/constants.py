"""Physical constants (SI), CODATA 2022 as scipy.constants gives them (the tests check that they agree).

Kept here so that importing emispec does not import scipy.constants (a tenth of a second at every start).
"""

#: Speed of light in vacuum [m/s] (exact).
C = 299_792_458.0
#: Vacuum magnetic permeability [H/m] (CODATA 2022).
MU_0 = 1.25663706127e-06
#: Vacuum electric permittivity [F/m] (CODATA 2022).
EPSILON_0 = 8.8541878188e-12
