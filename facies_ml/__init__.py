"""facies_ml: carry a core-calibrated lithofacies and systems-tract interpretation into
uncored offset wells from wireline logs.

Predictions are probabilistic and must be reviewed by a qualified geoscientist; they defer
to local regulations and licensed practice.
"""

__version__ = "0.1.0"

CAUTION = (
    "CAUTION: predictions are probabilistic. They must be reviewed by a qualified "
    "geoscientist before any drilling or investment decision, and they defer to local "
    "regulations and licensed practice."
)
