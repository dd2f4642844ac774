"""limitlap: how much lap time a driver's own demonstrated grip still allows.

From a logged session: the driven racing line, a g-g-V grip envelope fitted to the
driver's best samples, the ideal speed profile by a quasi-steady-state point-mass solver,
and the comparison with the real lap corner by corner.
"""

__version__ = "0.1.0"
