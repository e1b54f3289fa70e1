"""Shared fixtures: a tiny generated basin and fast settings for end-to-end tests."""

from __future__ import annotations

from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
SHARED_DATA = REPO.parent / "shared" / "data"


@pytest.fixture(scope="session")
def tiny_basin(tmp_path_factory) -> Path:
    """4 wells (3 cored), ~600 samples each, from the demo basin's forward model."""
    from facies_ml.synthetic import generate_basin

    out = tmp_path_factory.mktemp("tiny_basin")
    generate_basin(out, n_wells=4, n_cored=3, seed=7, samples_per_well=700)
    return out


@pytest.fixture(scope="session")
def fast_config(tmp_path_factory) -> Path:
    """Project settings with fewer boosting rounds so end-to-end tests stay quick."""
    path = tmp_path_factory.mktemp("cfg") / "fast.yaml"
    path.write_text("lithofacies:\n  n_estimators: 60\n  early_stopping_rounds: 15\n"
                    "sequence:\n  evidence_weight_grid: [0.01, 0.05]\n")
    return path
