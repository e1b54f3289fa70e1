"""Systems-tract sequence model: rule table, tract evidence, thickness models, semi-Markov
decoding and surfaces.

Every sequence operation runs UP-SECTION (from the deepest sample upward).
"""

from facies_ml.sequence.durations import (
    DurationModel,
    ExplicitDuration,
    MinimumGeometricDuration,
    fit_durations,
)
from facies_ml.sequence.model import (
    DecodeResult,
    SequenceParameters,
    TractSequenceModel,
    WellSequence,
)
from facies_ml.sequence.rules import TractRules, load_rules
from facies_ml.sequence.semimarkov import (
    SemiMarkovTables,
    forward_backward_semimarkov,
    viterbi_semimarkov,
)
from facies_ml.sequence.surfaces import Surface, SurfaceChecks, pick_surfaces

__all__ = [
    "DecodeResult",
    "DurationModel",
    "ExplicitDuration",
    "MinimumGeometricDuration",
    "SemiMarkovTables",
    "SequenceParameters",
    "Surface",
    "SurfaceChecks",
    "TractRules",
    "TractSequenceModel",
    "WellSequence",
    "fit_durations",
    "forward_backward_semimarkov",
    "load_rules",
    "pick_surfaces",
    "viterbi_semimarkov",
]
