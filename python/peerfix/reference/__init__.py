"""The float64 twin of the method: the reference the fixed-point core must match.

Same module split as c_core/src: mixture algebra (mixture.py), range update
(ranging.py), node state and iteration (node.py); settings in params.py.
"""

from .engine_float import FloatEngine
from .mixture import Mixture, PointEstimate
from .node import BlockedModel
from .params import EstimatorParams

__all__ = ["BlockedModel", "EstimatorParams", "FloatEngine", "Mixture", "PointEstimate"]
