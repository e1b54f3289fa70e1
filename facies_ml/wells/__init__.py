"""Reading wells: LAS and tables, curve roles, units, cleaning, GR normalization."""

from facies_ml.wells.intake import intake_summary, read_table, read_well, read_wells
from facies_ml.wells.model import ROLES, Well, depth_factor
from facies_ml.wells.normalize import GRNormalizer
from facies_ml.wells.roles import AliasTable, load_alias_table

__all__ = [
    "ROLES", "Well", "depth_factor", "read_well", "read_wells", "read_table", "GRNormalizer",
    "intake_summary", "AliasTable", "load_alias_table",
]
