"""Analysis of trajectories: conformations and statistics with honest error bars."""

from .conformation import end_to_end, radius_of_gyration_squared
from .stats import Estimate, block_average

__all__ = ["Estimate", "block_average", "end_to_end", "radius_of_gyration_squared"]
