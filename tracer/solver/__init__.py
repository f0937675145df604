"""The field solver: Shortley–Weller stencils on a Raster, solved by geometric multigrid.

``solve_unit_maps`` gives one unit map per electrode, ``solve_poisson`` the potential of a space
charge; ``assemble`` writes the same linear system as a scipy sparse matrix.
"""

from .assemble import LinearSystem, assemble
from .multigrid import SolveError
from .unit import UnitSolution, solve_poisson, solve_unit_maps

__all__ = ["LinearSystem", "SolveError", "UnitSolution", "assemble", "solve_poisson", "solve_unit_maps"]
