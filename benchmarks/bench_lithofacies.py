"""Training and prediction throughput of LithofaciesClassifier on a synthetic feature matrix.

100 000 samples x 60 features, 6 classes, 5 pseudo-wells (for the group-aware early stopping),
2 threads. Prints samples per second for fit (including early stopping and the refit) and for
predict_proba / contributions. Usage: python benchmarks/bench_lithofacies.py [--n N]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd

from facies_ml.config import load_config
from facies_ml.lithofacies import LithofaciesClassifier


def synthetic(n: int, n_features: int = 60, k: int = 6, seed: int = 0
              ) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    y = rng.integers(0, k, n)
    centres = rng.normal(0, 1, (k, n_features))
    X = centres[y] * 0.6 + rng.normal(0, 1, (n, n_features))
    groups = np.repeat(np.arange(5), int(np.ceil(n / 5)))[:n]
    return pd.DataFrame(X, columns=[f"f{i:02d}" for i in range(n_features)]), y, groups


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100_000)
    ap.add_argument("--n-estimators", type=int, default=None)
    args = ap.parse_args(argv)
    cfg = load_config()
    changes = {"n_estimators": args.n_estimators} if args.n_estimators else {}
    X, y, g = synthetic(args.n)
    t0 = time.perf_counter()
    model = LithofaciesClassifier.from_settings(cfg.settings.lithofacies, cfg.seed,
                                                **changes).fit(X, y, groups=g)
    fit_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    p = model.predict_proba(X)
    pred_s = time.perf_counter() - t0
    sub = X.iloc[:10_000]
    t0 = time.perf_counter()
    model.contributions(sub)
    contrib_s = time.perf_counter() - t0
    acc = float((p.argmax(1) == y).mean())
    print(f"samples {len(X)}, features {X.shape[1]}, classes 6, threads {model.n_jobs}")
    print(f"fit: {fit_s:.1f} s, {len(X) / fit_s:,.0f} samples/s "
          f"(best iteration {model.best_iteration_}, early stop + refit)")
    print(f"predict_proba: {pred_s:.2f} s, {len(X) / pred_s:,.0f} samples/s")
    print(f"contributions: {contrib_s:.2f} s, {len(sub) / contrib_s:,.0f} samples/s")
    print(f"training accuracy {acc:.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
