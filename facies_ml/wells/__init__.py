"""Reading wells: LAS and tables, curve roles, units, cleaning, GR normalization."""

from facies_ml.wells.model import ROLES, Well, depth_factor

__all__ = ["ROLES", "Well", "depth_factor"]
