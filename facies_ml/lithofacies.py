"""LightGBM lithofacies classifier (scikit-learn compatible), feature-subset models for wells
that lack a curve, and calibration / explanation summaries.

Samples are rows of a feature table (see :mod:`facies_ml.features`); row order does not matter
to the classifier (depth direction only matters inside the features).
"""

from __future__ import annotations

import dataclasses
import hashlib
from collections.abc import Callable, Sequence
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.model_selection import GroupShuffleSplit

from facies_ml.errors import InputError
from facies_ml.settings import LithofaciesSettings


def _as_frame(X: Any, names: Sequence[str] | None = None) -> pd.DataFrame:
    if isinstance(X, pd.DataFrame):
        return X
    arr = np.asarray(X, dtype=float)
    if arr.ndim != 2:
        raise InputError(f"feature matrix must be 2-D, got shape {arr.shape}")
    cols = list(names) if names is not None else [f"f{i}" for i in range(arr.shape[1])]
    if len(cols) != arr.shape[1]:
        raise InputError(f"feature matrix has {arr.shape[1]} columns, the model expects "
                         f"{len(cols)}")
    return pd.DataFrame(arr, columns=cols)


def _numeric(X: pd.DataFrame) -> np.ndarray:
    try:
        return X.to_numpy(dtype=float)
    except (TypeError, ValueError):
        bad = [c for c in X.columns if not pd.api.types.is_numeric_dtype(X[c])]
        raise InputError("feature column holds non-numeric values",
                         curve=str(bad[0]) if bad else None) from None


class LithofaciesClassifier(BaseEstimator, ClassifierMixin):
    """Multiclass gradient-boosted trees (LightGBM) over log features.

    ``fit`` takes integer class indices 0..K-1. With ``groups`` (well names) and
    ``early_stopping_rounds > 0``, whole wells (share ``validation_fraction``, at least one) are
    held out by :class:`sklearn.model_selection.GroupShuffleSplit` to choose the number of
    boosting rounds; the final model is then refitted on ALL training rows with that many rounds.
    Without groups (or with a single group) no early stopping happens and ``n_estimators``
    rounds are used: a random sample split would leak through vertically correlated samples.
    Classes absent from training get a probability column of exactly 0.
    ``class_weight="balanced"`` weights each sample by n / (K_present * n_class); ``None`` = 1.

    The project's values live in ``configs/default.yaml`` (section ``lithofacies``): build the
    project's classifier with :meth:`from_settings`. The ``__init__`` defaults are LightGBM's own
    (100 rounds, learning rate 0.1, 31 leaves, 20 samples per leaf, no bagging, no L2, 255 bins)
    with no class weighting and no early stopping, so a bare ``LithofaciesClassifier()`` is a
    plain LightGBM multiclass model.
    """

    def __init__(self, n_estimators: int = 100, learning_rate: float = 0.1, num_leaves: int = 31,
                 min_child_samples: int = 20, subsample: float = 1.0,
                 colsample_bytree: float = 1.0, reg_lambda: float = 0.0,
                 class_weight: str | None = None, early_stopping_rounds: int = 0,
                 validation_fraction: float = 0.2, n_jobs: int = 1, random_state: int = 0,
                 max_bin: int = 255) -> None:
        self.n_estimators = n_estimators
        self.learning_rate = learning_rate
        self.num_leaves = num_leaves
        self.min_child_samples = min_child_samples
        self.subsample = subsample
        self.colsample_bytree = colsample_bytree
        self.reg_lambda = reg_lambda
        self.class_weight = class_weight
        self.early_stopping_rounds = early_stopping_rounds
        self.validation_fraction = validation_fraction
        self.n_jobs = n_jobs
        self.random_state = random_state
        self.max_bin = max_bin

    @classmethod
    def from_settings(cls, settings: LithofaciesSettings, random_state: int,
                      **changes: Any) -> LithofaciesClassifier:
        """The classifier the project settings describe (``changes`` override single
        parameters, e.g. ``class_weight=None`` for the tract model)."""
        return cls(**{**dataclasses.asdict(settings), "random_state": random_state, **changes})

    # ------------------------------------------------------------------ internals
    def _params(self, n_present: int) -> dict[str, Any]:
        seed = int(self.random_state)
        return {
            "objective": "multiclass", "num_class": n_present,
            "learning_rate": float(self.learning_rate), "num_leaves": int(self.num_leaves),
            "min_data_in_leaf": int(self.min_child_samples),
            "bagging_fraction": float(self.subsample),
            "bagging_freq": 1 if self.subsample < 1 else 0,
            "feature_fraction": float(self.colsample_bytree), "lambda_l2": float(self.reg_lambda),
            "num_threads": int(self.n_jobs), "seed": seed, "bagging_seed": seed,
            "feature_fraction_seed": seed, "data_random_seed": seed, "deterministic": True,
            "force_row_wise": True, "verbosity": -1, "max_bin": int(self.max_bin),
        }

    def _weights(self, y_local: np.ndarray, n_present: int) -> np.ndarray | None:
        if self.class_weight is None:
            return None
        if self.class_weight != "balanced":
            raise InputError(f"class_weight must be 'balanced' or None, not {self.class_weight!r}")
        counts = np.bincount(y_local, minlength=n_present).astype(float)
        return len(y_local) / (n_present * counts[y_local])

    # ------------------------------------------------------------------ API
    def fit(self, X: pd.DataFrame, y: np.ndarray, groups: np.ndarray | None = None,
            n_classes: int | None = None) -> LithofaciesClassifier:
        """Fit on features ``X`` (rows = samples) and class indices ``y`` (0..K-1)."""
        X = _as_frame(X)
        y = np.asarray(y)
        if len(y) != len(X):
            raise InputError(f"{len(X)} feature rows but {len(y)} labels")
        if len(y) == 0:
            raise InputError("no labelled samples to train on")
        if not np.issubdtype(y.dtype, np.integer):
            if not np.all(np.isfinite(y.astype(float))) or np.any(y != np.round(y)):
                raise InputError("labels must be integer class indices")
            y = y.astype(int)
        if y.min() < 0:
            raise InputError(f"label {int(y.min())} is negative; drop unlabelled rows before fit",
                             row=int(np.argmin(y)))
        k = int(n_classes) if n_classes is not None else int(y.max()) + 1
        if y.max() >= k:
            raise InputError(f"label {int(y.max())} is outside 0..{k - 1}", row=int(np.argmax(y)))
        present = np.unique(y)
        if len(present) < 2:
            raise InputError(f"training labels hold only one class ({int(present[0])})")
        local = np.full(k, -1, dtype=int)
        local[present] = np.arange(len(present))
        y_local = local[y]
        values = _numeric(X)
        weights = self._weights(y_local, len(present))
        params = self._params(len(present))
        names = [str(c) for c in X.columns]

        best = int(self.n_estimators)
        self.validation_groups_: list[Any] = []
        if groups is not None and self.early_stopping_rounds and self.early_stopping_rounds > 0:
            groups = np.asarray(groups)
            if len(groups) != len(y):
                raise InputError(f"{len(y)} labels but {len(groups)} group entries")
            if len(np.unique(groups)) >= 2:
                gss = GroupShuffleSplit(n_splits=1, test_size=self.validation_fraction,
                                        random_state=int(self.random_state))
                tr, va = next(gss.split(values, y_local, groups))
                self.validation_groups_ = sorted(np.unique(groups[va]).tolist())
                # The class set stays fixed; a class missing from the inner-training wells
                # simply has no positive examples there.
                dtr = lgb.Dataset(values[tr], y_local[tr], feature_name=names,
                                  weight=None if weights is None else weights[tr],
                                  free_raw_data=True)
                dva = lgb.Dataset(values[va], y_local[va], reference=dtr,
                                  weight=None if weights is None else weights[va])
                booster = lgb.train(params, dtr, num_boost_round=int(self.n_estimators),
                                    valid_sets=[dva],
                                    callbacks=[lgb.early_stopping(int(self.early_stopping_rounds),
                                                                  verbose=False)])
                best = max(1, int(booster.best_iteration or self.n_estimators))
        dall = lgb.Dataset(values, y_local, feature_name=names, weight=weights)
        self.booster_ = lgb.train(params, dall, num_boost_round=best)
        self.best_iteration_ = best
        self.feature_names_in_ = np.asarray(names, dtype=object)
        self.n_features_in_ = len(names)
        self.classes_ = np.arange(k)
        self.present_classes_ = present
        return self

    def _matrix(self, X: Any) -> np.ndarray:
        if not hasattr(self, "booster_"):
            raise InputError("the lithofacies model is not fitted")
        names = list(self.feature_names_in_)
        X = _as_frame(X, names if not isinstance(X, pd.DataFrame) else None)
        missing = [c for c in names if c not in X.columns]
        if missing:
            raise InputError(f"feature table lacks {len(missing)} model feature(s)",
                             curve=str(missing[0]))
        return _numeric(X[names])

    def _predict_kwargs(self) -> dict[str, Any]:
        """Thread count for prediction: ``predict_threads`` when set (batch workers set it to
        their share of the cores), else the training setting. Results do not depend on it."""
        threads = getattr(self, "predict_threads", None)
        return {"num_threads": int(threads)} if threads else {}

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities, shape (n_samples, K); absent classes have probability 0."""
        values = self._matrix(X)
        p = np.asarray(self.booster_.predict(values, **self._predict_kwargs()),
                       dtype=float).reshape(len(values), -1)
        out = np.zeros((len(values), len(self.classes_)))
        out[:, self.present_classes_] = p
        return out

    def predict(self, X: Any) -> np.ndarray:
        """Most probable class index per sample."""
        return self.classes_[self.predict_proba(X).argmax(axis=1)]

    def contributions(self, X: Any) -> np.ndarray:
        """Per-sample feature contributions to the raw score (LightGBM ``pred_contrib``).

        Shape (n_samples, K, n_features + 1); the last entry is the bias. Absent classes are 0.
        """
        values = self._matrix(X)
        nf = len(self.feature_names_in_)
        raw = np.asarray(self.booster_.predict(values, pred_contrib=True, **self._predict_kwargs()),
                         dtype=float)
        raw = raw.reshape(len(values), len(self.present_classes_), nf + 1)
        out = np.zeros((len(values), len(self.classes_), nf + 1))
        out[:, self.present_classes_, :] = raw
        return out


def available_features(X: pd.DataFrame) -> list[str]:
    """Columns of a well's feature table holding at least one finite value."""
    return [c for c in X.columns if np.isfinite(pd.to_numeric(X[c], errors="coerce")).any()]


class SubsetModels:
    """Models on feature subsets, for offset wells that lack a curve the main model used.

    ``factory()`` returns an unfitted estimator; ``X``/``y``/``groups`` are the training data
    (kept by reference). :meth:`model_for` trains LAZILY, once per distinct subset (cached).
    :attr:`served` records which model served each named well (see :meth:`report`).
    """

    def __init__(self, factory: Callable[[], Any], X: pd.DataFrame, y: np.ndarray,
                 groups: np.ndarray | None = None, n_classes: int | None = None) -> None:
        self.factory = factory
        self.X = X
        self.y = np.asarray(y)
        self.groups = None if groups is None else np.asarray(groups)
        self.n_classes = n_classes
        self.models: dict[str, Any] = {}
        self.subsets: dict[str, list[str]] = {}
        self.served: dict[str, str] = {}
        self.predict_threads: int | None = None

    def set_predict_threads(self, threads: int | None) -> None:
        """Prediction thread count for every model here, now and trained later."""
        self.predict_threads = threads
        for model in self.models.values():
            model.predict_threads = threads

    def _name(self, cols: list[str]) -> str:
        if len(cols) == self.X.shape[1]:
            return "full"
        dropped = [c for c in self.X.columns if c not in cols]
        digest = hashlib.sha1("\n".join(cols).encode()).hexdigest()[:8]
        return f"subset-{len(cols)}of{self.X.shape[1]}-{digest} (without {', '.join(dropped[:3])}" \
               f"{', ...' if len(dropped) > 3 else ''})"

    def model_for(self, available_features: Sequence[str], well: str | None = None
                  ) -> tuple[Any, str]:
        """(fitted model, model name) using only the training features in
        ``available_features``; trained on first request, then cached."""
        wanted = set(available_features)
        cols = [c for c in self.X.columns if c in wanted]
        if not cols:
            raise InputError("the well has none of the features the model was trained on",
                             well=well)
        name = self._name(cols)
        if name not in self.models:
            # In a batch worker train on the worker's share of the cores too: two workers each
            # training with two threads on two cores run several times slower. LightGBM with
            # ``deterministic`` gives the same trees for any thread count (checked in tests).
            threads = getattr(self, "predict_threads", None)
            model = self.factory(n_jobs=threads) if threads else self.factory()
            model.fit(self.X[cols], self.y, groups=self.groups, n_classes=self.n_classes)
            model.predict_threads = threads
            self.models[name] = model
            self.subsets[name] = cols
        if well is not None:
            self.served[str(well)] = name
        return self.models[name], name

    def report(self) -> pd.DataFrame:
        """One row per well served: the model name and its number of features."""
        rows = [{"well": w, "model": m, "n_features": len(self.subsets[m])}
                for w, m in self.served.items()]
        return pd.DataFrame(rows, columns=["well", "model", "n_features"])


def summarize_contributions(contrib: np.ndarray, feature_names: Sequence[str],
                            pred_class: np.ndarray, class_labels: Sequence[str]) -> pd.DataFrame:
    """Mean |contribution| of each feature to the predicted class's raw score, per facies.

    ``contrib`` from :meth:`LithofaciesClassifier.contributions` (n, K, F+1; bias dropped).
    Rows = features sorted by overall mean, columns = class labels (NaN where no sample is
    predicted as that class) plus ``all``.
    """
    contrib = np.asarray(contrib, dtype=float)
    pred_class = np.asarray(pred_class, dtype=int)
    n, k, f1 = contrib.shape
    if f1 != len(feature_names) + 1 or k != len(class_labels) or len(pred_class) != n:
        raise InputError(f"contributions shape {contrib.shape} does not match "
                         f"{len(feature_names)} features, {len(class_labels)} classes, "
                         f"{len(pred_class)} predictions")
    own = np.abs(contrib[np.arange(n), pred_class, :-1])          # (n, F)
    table = {}
    for j, label in enumerate(class_labels):
        m = pred_class == j
        table[str(label)] = own[m].mean(axis=0) if m.any() else np.full(f1 - 1, np.nan)
    table["all"] = own.mean(axis=0) if n else np.full(f1 - 1, np.nan)
    out = pd.DataFrame(table, index=pd.Index(list(feature_names), name="feature"))
    return out.sort_values("all", ascending=False)


def _check_proba(y_true: np.ndarray, proba: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    y = np.asarray(y_true, dtype=int)
    p = np.asarray(proba, dtype=float)
    if p.ndim != 2 or len(p) != len(y):
        raise InputError(f"probabilities of shape {p.shape} do not match {len(y)} labels")
    if len(y) and (y.min() < 0 or y.max() >= p.shape[1]):
        raise InputError(f"labels must lie in 0..{p.shape[1] - 1}")
    return y, p


def brier_per_class(y_true: np.ndarray, proba: np.ndarray) -> dict[int, float]:
    """One-vs-rest Brier score per class index: mean of (p_k - [y == k])**2."""
    y, p = _check_proba(y_true, proba)
    onehot = np.eye(p.shape[1])[y]
    return {k: float(np.mean((p[:, k] - onehot[:, k]) ** 2)) for k in range(p.shape[1])}


def reliability_table(y_true: np.ndarray, proba: np.ndarray, n_bins: int = 10) -> pd.DataFrame:
    """One-vs-rest reliability per class: predicted probability in ``n_bins`` equal-width bins
    on [0, 1] (last bin closed); columns class, bin, lower, upper, n, mean_predicted,
    observed_frequency. Empty bins are omitted."""
    y, p = _check_proba(y_true, proba)
    edges = np.linspace(0.0, 1.0, int(n_bins) + 1)
    rows = []
    for k in range(p.shape[1]):
        pk = p[:, k]
        hit = (y == k).astype(float)
        b = np.clip(np.digitize(pk, edges[1:-1], right=False), 0, n_bins - 1)
        for i in range(n_bins):
            m = b == i
            if m.any():
                rows.append({"class": k, "bin": i, "lower": edges[i], "upper": edges[i + 1],
                             "n": int(m.sum()), "mean_predicted": float(pk[m].mean()),
                             "observed_frequency": float(hit[m].mean())})
    return pd.DataFrame(rows, columns=["class", "bin", "lower", "upper", "n", "mean_predicted",
                                       "observed_frequency"])


def cost_score(y_true: np.ndarray, y_pred: np.ndarray, cost: np.ndarray) -> float:
    """Negative mean misclassification cost, -mean(cost[true, pred]) (0 = perfect).

    ``y_true``/``y_pred`` are class indices into the square ``cost`` matrix (rows = true).
    """
    c = np.asarray(cost, dtype=float)
    t = np.asarray(y_true, dtype=int)
    p = np.asarray(y_pred, dtype=int)
    if c.ndim != 2 or c.shape[0] != c.shape[1]:
        raise InputError(f"cost matrix must be square, got shape {c.shape}")
    if len(t) != len(p) or len(t) == 0:
        raise InputError(f"{len(t)} true and {len(p)} predicted labels")
    if min(t.min(), p.min()) < 0 or max(t.max(), p.max()) >= c.shape[0]:
        raise InputError(f"class indices must lie in 0..{c.shape[0] - 1}")
    return -float(np.mean(c[t, p]))
