"""Circuit solver: MNA, discrete state-space (nodal DK-method), compiled
kernel, DC operating point and small-signal AC.

    from solderless.engine.solver import Simulator, OperatingPoint, ac_response
"""
from solderless.engine.solver.ac import ac_response
from solderless.engine.solver.dcop import OperatingPoint, operating_point
from solderless.engine.solver.simulator import Simulator

__all__ = ["Simulator", "OperatingPoint", "ac_response", "operating_point"]
