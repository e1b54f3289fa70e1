"""Systems-tract sequence model: rule table, constrained decoding, minimum thickness, surfaces.

Every sequence operation runs UP-SECTION (from the deepest sample upward).
"""

from facies_ml.sequence.decode import (
    ExpandedModel,
    expand_durations,
    forward_backward,
    forward_backward_durations,
    viterbi,
    viterbi_durations,
)
from facies_ml.sequence.model import DecodeResult, TractSequenceModel
from facies_ml.sequence.rules import TractRules, load_rules
from facies_ml.sequence.surfaces import Surface, pick_surfaces

__all__ = [
    "DecodeResult",
    "ExpandedModel",
    "Surface",
    "TractRules",
    "TractSequenceModel",
    "expand_durations",
    "forward_backward",
    "forward_backward_durations",
    "load_rules",
    "pick_surfaces",
    "viterbi",
    "viterbi_durations",
]
