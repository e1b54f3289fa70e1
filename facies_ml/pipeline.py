"""The end-to-end model: fit on cored key wells, predict any offset well.

Flow for one well: conditioned curves (``facies_ml.wells``) -> features (``facies_ml.features``)
-> lithofacies probabilities (LightGBM, ``facies_ml.lithofacies``) -> systems-tract classifier
posteriors turned into scaled likelihoods (posterior / prior, Bourlard & Morgan 1994) -> HMM
decoding **up-section** under the rule table with minimum thicknesses (``facies_ml.sequence``)
-> surfaces (SB, MFS with p10-p90 depth ranges).

Every fitted piece (GR normalization reference, feature reference, both classifiers, the
transition and thickness statistics, the applicability envelope) is learned from the wells
passed to :meth:`FaciesPipeline.fit` only, so leave-one-well-out evaluation is honest.

Predictions are probabilistic and must be reviewed by a qualified geoscientist.
"""

from __future__ import annotations

import dataclasses
import hashlib
from dataclasses import dataclass, field, replace
from functools import partial
from typing import Any

import numpy as np
import pandas as pd

from facies_ml.applicability import FeatureEnvelope
from facies_ml.config import Config
from facies_ml.correlation import SequenceCorrelator, SequenceUnit, split_sequences, unit_names_from_samples
from facies_ml.errors import InputError
from facies_ml.features import build_features, feature_reference
from facies_ml.lithofacies import LithofaciesClassifier, SubsetModels
from facies_ml.sequence import TractSequenceModel, load_rules
from facies_ml.sequence.evidence import tract_evidence_matrix
from facies_ml.sequence.surfaces import Surface, SurfaceChecks
from facies_ml.settings import FeatureSettings
from facies_ml.wells import GRNormalizer, Well

UNLABELLED = -1


@dataclass
class WellPrediction:
    """Prediction for one well; ``table`` is indexed by depth (working unit, top-down)."""

    well: Well
    table: pd.DataFrame
    surfaces: list[Any]
    model_used: str
    out_of_range_fraction: float
    rule_violations_raw: int
    rule_violations: int
    info: dict[str, Any] = field(default_factory=dict)


def _lgbm_params(config: Config) -> dict[str, Any]:
    """LithofaciesClassifier parameters from the checked settings (seed = project.seed)."""
    return {**dataclasses.asdict(config.settings.lithofacies), "random_state": config.seed}


def _carried_features(well: Well, X: pd.DataFrame, wells: list[Well], settings: FeatureSettings,
                      reference: dict) -> list[str]:
    """Feature columns ``well`` counts as carrying: those with data in ``X``, plus those its
    unusable curves (logged, but all null or constant) would give. The latter are named by
    building features once on a copy whose unusable curves are filled, for naming only, with
    another training well's values of that curve (repeated to length); nothing of it is
    trained on."""
    have = [str(c) for c in X.columns[X.notna().any().to_numpy()]]
    bad = [r for r in (well.intake.get("unusable_curves") or {}) if r not in well.curves]
    stand_in = well.curves.copy()
    for role in bad:
        donor = next((w.curves[role].to_numpy(dtype=float) for w in wells
                      if w is not well and role in w.curves and w.curves[role].notna().any()),
                     None)
        if donor is not None:
            stand_in[role] = np.resize(donor, len(stand_in))
    if stand_in.shape[1] == well.curves.shape[1]:
        return have
    try:
        named = build_features(stand_in, well.step, settings, reference)
    except InputError:
        return have
    extra = [str(c) for c in named.columns[named.notna().any().to_numpy()] if c not in have]
    return have + extra


class FaciesPipeline:
    """Lithofacies + systems-tract model for one project configuration.

    Parameters
    ----------
    config : the loaded project settings (``facies_ml.config.load_config``).
    """

    def __init__(self, config: Config) -> None:
        self.config = config

    # ------------------------------------------------------------------ fitting
    def fit(self, wells: list[Well], labels: dict[str, pd.DataFrame]) -> FaciesPipeline:
        """Fit every stage on ``wells`` using per-sample ``labels`` (from ``facies_ml.core``).

        ``labels[name]`` has columns ``lithofacies`` and ``systems_tract`` (class indices,
        -1 = unlabelled) on the well's depth index.
        """
        cfg = self.config
        labelled = [w for w in wells if w.name in labels]
        if not labelled:
            raise InputError("no training well has core labels; check the core file's well names")
        norm = cfg.settings.intake.gr_normalization
        self.gr_normalizer_ = None
        if norm.enabled:
            self.gr_normalizer_ = GRNormalizer(norm.low_percentile,
                                               norm.high_percentile).fit(labelled)
            labelled = [self.gr_normalizer_.transform(w) for w in labelled]
        settings = cfg.settings.features
        self.feature_reference_ = feature_reference([w.curves for w in labelled], settings)
        frames, y_facies, y_tract, groups = [], [], [], []
        for w in labelled:
            X = build_features(w.curves, w.step, settings, self.feature_reference_)
            lab = labels[w.name].reindex(X.index)
            frames.append(X)
            y_facies.append(lab["lithofacies"].fillna(UNLABELLED).to_numpy(int))
            y_tract.append(lab["systems_tract"].fillna(UNLABELLED).to_numpy(int))
            groups.append(np.full(len(X), w.name, dtype=object))
        # Drop features that only a minority of the training wells carry (e.g. spectral gamma
        # in two of five wells): a model leaning on them would serve few offset wells. A well
        # whose curve was logged but unusable (all null or constant, ``unusable_curves`` in its
        # intake) counts as carrying that curve's features: one bad log never removes a curve
        # from the whole model; that well simply has missing values for them.
        coverage = settings.min_well_coverage
        counts: dict[str, int] = {}
        for w, X in zip(labelled, frames, strict=True):
            for col in _carried_features(w, X, labelled, settings, self.feature_reference_):
                counts[col] = counts.get(col, 0) + 1
        keep = [c for c in frames[0].columns.union(pd.Index(list(counts)), sort=False)
                if counts.get(c, 0) >= coverage * len(frames)]
        self.dropped_features_ = sorted(set(counts) - set(keep))
        X_all = pd.concat(frames, axis=0, ignore_index=True, sort=False).reindex(columns=keep)
        self.feature_names_ = list(X_all.columns)
        yf = np.concatenate(y_facies)
        yt = np.concatenate(y_tract)
        g = np.concatenate(groups)
        n_facies = len(cfg.facies.classes)
        has_f = yf >= 0
        if has_f.sum() == 0:
            raise InputError("the core file gives no lithofacies labels inside the logged intervals")
        params = _lgbm_params(cfg)
        self.facies_model_ = LithofaciesClassifier(**params).fit(
            X_all[has_f], yf[has_f], groups=g[has_f], n_classes=n_facies)
        self.subset_models_ = SubsetModels(
            partial(LithofaciesClassifier, **params), X_all[has_f], yf[has_f], g[has_f],
            n_classes=n_facies)

        self.rules_ = load_rules(cfg.path("sequence_rules"))
        self.tract_names_ = list(self.rules_.states)
        yt = self.tract_states(yt)
        self.tract_model_ = None
        self.sequence_model_ = None
        if (yt >= 0).sum() > 0:
            self._fit_sequence_stage(frames, keep, y_facies, y_tract, params)
            self._fit_correlation(labelled, [labels[w.name] for w in labelled])
        env = cfg.settings.applicability
        self.envelope_ = FeatureEnvelope(env.lower_quantile, env.upper_quantile,
                                         env.min_features).fit(X_all)
        self.training_wells_ = [w.name for w in labelled]
        # Deterministic identity of this fit (training features + labels + settings); batch
        # workers use it to keep one copy per process, with its lazily trained subset models.
        digest = hashlib.sha256(cfg.digest().encode())
        digest.update(pd.util.hash_pandas_object(X_all, index=False).to_numpy().tobytes())
        digest.update(yf.tobytes())
        digest.update(yt.tobytes())
        self.fit_id_ = digest.hexdigest()[:16]
        return self

    def _facies_oof(self, frames: list[pd.DataFrame], y_facies: list[np.ndarray],
                    keep: list[str], params: dict[str, Any]) -> list[np.ndarray]:
        """Held-out lithofacies probabilities of each training well: the lithofacies model
        refitted without that well (the way an offset well sees it). With one labelled well
        the in-sample probabilities are used."""
        n_facies = len(self.config.facies.classes)
        labelled = [k for k, y in enumerate(y_facies) if (y >= 0).any()]
        out = []
        for k, X in enumerate(frames):
            others = [j for j in labelled if j != k]
            yo = (np.concatenate([y_facies[j] for j in others]) if others
                  else np.zeros(0, dtype=int))
            if np.unique(yo[yo >= 0]).size < 2:       # nothing to learn from without this well
                model = self.facies_model_
            else:
                Xo = pd.concat([frames[j] for j in others], ignore_index=True).reindex(
                    columns=keep)
                go = np.concatenate([np.full(len(frames[j]), j) for j in others])
                ok = yo >= 0
                model = LithofaciesClassifier(**params).fit(Xo[ok], yo[ok], groups=go[ok],
                                                            n_classes=n_facies)
            out.append(model.predict_proba(X.reindex(columns=model.feature_names_in_)))
        return out

    def _fit_sequence_stage(self, frames: list[pd.DataFrame], keep: list[str],
                            y_facies: list[np.ndarray], y_tract: list[np.ndarray],
                            params: dict[str, Any]) -> None:
        """Tract evidence model on log features + held-out lithofacies probabilities, the
        semi-Markov sequence model on the core tracts, and its evidence weight calibrated on
        held-out tract posteriors of the training wells."""
        cfg = self.config
        seq = cfg.settings.sequence
        labels = cfg.facies.labels
        self.evidence_settings_ = {
            "windows": list(seq.facies_windows), "curves": list(seq.stacking_curves),
            "curve_windows": list(seq.stacking_windows)}
        step = cfg.step
        facies_oof = self._facies_oof(frames, y_facies, keep, params)
        evid = [tract_evidence_matrix(X.reindex(columns=keep), p, labels, step,
                                      **self.evidence_settings_)
                for X, p in zip(frames, facies_oof, strict=True)]
        y_states = [self.tract_states(y) for y in y_tract]
        E_all = pd.concat(evid, ignore_index=True)
        yt = np.concatenate(y_states)
        g = np.concatenate([np.full(len(E), k) for k, E in enumerate(evid)])
        # neighbouring samples of one tract carry nearly the same evidence: every
        # ``evidence_row_stride``-th labelled sample trains the tract models (faster, same fit)
        stride = seq.evidence_row_stride
        has_t = (yt >= 0) & (np.arange(yt.size) % stride == 0)
        n_tracts = len(self.tract_names_)
        tract_params = dict(params, class_weight=None)
        self.tract_model_ = LithofaciesClassifier(**tract_params).fit(
            E_all[has_t], yt[has_t], groups=g[has_t], n_classes=n_tracts)
        self.tract_subset_models_ = SubsetModels(
            partial(LithofaciesClassifier, **tract_params), E_all[has_t], yt[has_t], g[has_t],
            n_classes=n_tracts)
        self.sequence_model_ = TractSequenceModel.from_settings(
            self.rules_, seq).fit(y_states, step=step, depth_unit=cfg.working_unit)
        # held-out tract posteriors of each training well -> evidence weight
        wells_t = [k for k, y in enumerate(y_states) if (y >= 0).any()]
        held_post, held_lab, held_depth = [], [], []
        if len(wells_t) >= 2 and len(seq.evidence_weight_grid) > 1:
            for k in wells_t:
                tr = (g != k) & has_t
                if np.unique(yt[tr]).size < 2:        # the other wells show one tract only
                    continue
                m = LithofaciesClassifier(**tract_params).fit(
                    E_all[tr], yt[tr], groups=g[tr], n_classes=n_tracts)
                held_post.append(m.predict_proba(evid[k].reindex(columns=m.feature_names_in_)))
                held_lab.append(y_states[k])
                held_depth.append(frames[k].index.to_numpy(float))
            if held_post:
                self.evidence_calibration_ = self.sequence_model_.calibrate_weight(
                    held_post, held_lab, held_depth,
                    list(seq.evidence_weight_grid), target_coverage=seq.target_coverage,
                    match_tolerance=cfg.settings.evaluation.surface_match_tolerance)
        self.surface_checks_ = SurfaceChecks(**dataclasses.asdict(seq.checks))

    def _fit_correlation(self, wells: list[Well], labels: list[pd.DataFrame]) -> None:
        """The basin's ordered sequence list from the cored wells' interpreted tracts and the
        core file's sequence names (numbered by the tool when the core file has none)."""
        units: dict[str, list[SequenceUnit]] = {}
        names: dict[str, list[str]] = {}
        for w, lab in zip(wells, labels, strict=True):
            yt = self.tract_states(lab["systems_tract"].reindex(w.curves.index)
                                   .fillna(UNLABELLED).to_numpy(int))
            ok = yt >= 0
            if ok.sum() < 2:
                continue
            u = split_sequences(w.depth[ok], yt[ok], w.curves.loc[ok], self.tract_names_,
                                self.rules_.sb_transitions,
                                mfs_transitions=self.rules_.mfs_transitions, well=w.name)
            units[w.name] = u
            seq = (lab["sequence"].reindex(w.curves.index).fillna("").astype(str).to_numpy()[ok]
                   if "sequence" in lab else np.full(int(ok.sum()), "", dtype=object))
            names[w.name] = unit_names_from_samples(u, list(seq))
        self.correlator_ = None
        if not units:
            return
        named = all(all(n for n in v) for v in names.values())
        self.correlator_ = SequenceCorrelator(
            **dataclasses.asdict(self.config.settings.correlation)).fit(
            units, names if named else None)

    def name_sequences(self, well: Well, path: np.ndarray, surfaces: list[Surface]
                       ) -> tuple[list[Surface], list[str], list[str]]:
        """Basin-wide names for a decoded well: (surfaces with ``sequence`` and flags set,
        per-sample sequence name TOP-DOWN, well-level flags)."""
        if getattr(self, "correlator_", None) is None or len(path) < 2:
            return surfaces, [""] * len(path), []
        units = split_sequences(well.depth, np.asarray(path), well.curves, self.tract_names_,
                                self.rules_.sb_transitions,
                                mfs_transitions=self.rules_.mfs_transitions, well=well.name)
        result = self.correlator_.assign(units, well.name)
        per_sample_up = np.full(len(path), "", dtype=object)
        for u, name in zip(units, result.names, strict=True):
            per_sample_up[u.first_sample:u.first_sample + u.n_samples] = name
        per_sample = per_sample_up[::-1]
        out = []
        for s in surfaces:
            # the first sample above the surface (``index``, up-section) belongs to the
            # sequence an MFS lies in; an SB is named after the sequence above it (the SB at
            # the base of sequence <name>)
            above = per_sample_up[min(max(s.index, 0), len(per_sample_up) - 1)]
            flags = list(s.flags)
            if not above:
                flags.append("extra sequence: matches no basin sequence")
            out.append(replace(s, sequence=str(above), flags=tuple(flags)))
        return out, list(per_sample), list(result.flags)

    def _tract_index_map(self) -> np.ndarray:
        """Map a core-file tract index (scheme order) to the rule-table state index."""
        out = []
        for name in self.config.facies.systems_tracts:
            if name not in self.tract_names_:
                raise InputError(f"systems tract {name!r} of the facies scheme is not a state of "
                                 "the sequence rule table", file=str(self.config.path("sequence_rules")))
            out.append(self.tract_names_.index(name))
        return np.asarray(out, dtype=int)

    def tract_states(self, tracts: np.ndarray) -> np.ndarray:
        """Core-file tract indices (scheme order, -1 = unlabelled) as rule-table state indices."""
        tracts = np.asarray(tracts, dtype=int)
        return np.where(tracts >= 0, self._tract_index_map()[np.clip(tracts, 0, None)], UNLABELLED)

    def set_predict_threads(self, threads: int | None) -> None:
        """Threads each LightGBM prediction may use (``None`` = the training setting). Batch
        workers set their share of the cores, so two workers do not each start two threads on
        a 2-core machine. Predictions are identical for any thread count."""
        for model in (getattr(self, "facies_model_", None), getattr(self, "tract_model_", None)):
            if model is not None:
                model.predict_threads = threads
        for subsets in (getattr(self, "subset_models_", None),
                        getattr(self, "tract_subset_models_", None)):
            if subsets is not None:
                subsets.set_predict_threads(threads)

    # --------------------------------------------------------------- prediction
    def _well_features(self, well: Well) -> tuple[Well, pd.DataFrame, list[str], list[str]]:
        """(GR-normalized well, its feature table, model features it has, model features it
        lacks). A feature counts as present when it has at least one finite value."""
        if well.depth_unit != self.config.working_unit:
            raise InputError(f"well is in {well.depth_unit}, the model works in "
                             f"{self.config.working_unit}", well=well.name)
        if self.gr_normalizer_ is not None:
            well = self.gr_normalizer_.transform(well)
        X = build_features(well.curves, well.step, self.config.settings.features,
                           self.feature_reference_)
        present = set(X.columns[X.notna().any().to_numpy()])
        have = [f for f in self.feature_names_ if f in present]
        missing = [f for f in self.feature_names_ if f not in present]
        return well, X, have, missing

    def predict_well(self, well: Well) -> WellPrediction:
        """Predict lithofacies and systems tracts for one conditioned well."""
        cfg = self.config
        well, X, have, missing = self._well_features(well)
        if missing:
            model, model_name = self.subset_models_.model_for(have, well=well.name)
        else:
            model, model_name = self.facies_model_, "full"
        Xm = X.reindex(columns=model.feature_names_in_)
        proba = model.predict_proba(Xm)
        labels = cfg.facies.labels
        table = pd.DataFrame(index=X.index)
        table.index.name = "depth"
        facies_idx = proba.argmax(axis=1)
        table["lithofacies"] = facies_idx
        table["lithofacies_label"] = np.asarray(labels, dtype=object)[facies_idx]
        table["lithofacies_code"] = np.asarray(cfg.facies.codes)[facies_idx]
        for k, lab in enumerate(labels):
            table[f"p_{lab}"] = proba[:, k]
        for col in ("toc_passey_density", "toc_passey_sonic"):
            if col in X:
                # Passey et al. (1990): a negative Delta log R separation carries no organic
                # signal, so the reported proxy is floored at 0 wt % (the model feature keeps
                # the signed value); NaN where the curves are missing stays NaN.
                toc = X[col].to_numpy(float)
                table["organic_proxy_toc_wt_pct"] = np.where(toc < 0.0, 0.0, toc)
                break
        X_model = X.reindex(columns=self.feature_names_)
        out_flag, outside = self.envelope_.assess(X_model)
        top_outside = dict(sorted(outside.items(), key=lambda kv: -kv[1])[:3])
        table["out_of_range"] = out_flag
        surfaces: list[Any] = []
        info_flags: list[str] = []
        viol_raw = viol = 0
        if self.tract_model_ is not None and self.sequence_model_ is not None:
            E = tract_evidence_matrix(X.reindex(columns=self.feature_names_), proba,
                                      labels, well.step, **self.evidence_settings_)
            tract_model = self.tract_model_
            present = set(E.columns[E.notna().any().to_numpy()])
            if any(f not in present for f in tract_model.feature_names_in_):
                tract_model, _ = self.tract_subset_models_.model_for(
                    [f for f in tract_model.feature_names_in_ if f in present], well=well.name)
            tract_post = tract_model.predict_proba(E.reindex(columns=tract_model.feature_names_in_))
            gr = well.curves["gr_api"].to_numpy(float) if "gr_api" in well.curves else None
            decoded = self.sequence_model_.decode_well(
                tract_post, X.index.to_numpy(float), gr, self.surface_checks_)
            names = np.asarray(self.tract_names_, dtype=object)
            table["systems_tract_raw"] = tract_post.argmax(axis=1)
            table["systems_tract"] = decoded.path
            table["systems_tract_label"] = names[decoded.path]
            for k, name in enumerate(self.tract_names_):
                table[f"p_{name}"] = decoded.posterior[:, k]
            surfaces, seq_names, seq_flags = self.name_sequences(well, decoded.path,
                                                                 decoded.surfaces)
            table["sequence"] = seq_names
            info_flags = seq_flags + [
                f"{x.kind} at {x.depth:.2f} {well.depth_unit} not reported: {'; '.join(x.flags)}"
                for x in decoded.edge_surfaces]
            viol_raw, viol = decoded.violations_raw, decoded.violations
        return WellPrediction(
            well=well, table=table, surfaces=surfaces, model_used=model_name,
            out_of_range_fraction=float(np.mean(out_flag)) if len(out_flag) else 0.0,
            rule_violations_raw=viol_raw, rule_violations=viol,
            info={"features_missing": missing, "sequence_flags": info_flags,
                  "out_of_range_top_features": {k: round(v, 3) for k, v in top_outside.items()}},
        )

    # ------------------------------------------------------------- explanation
    def explain_well(self, well: Well, every: int = 10, top: int = 8) -> pd.DataFrame:
        """Mean |LightGBM pred_contrib| of each feature to the predicted facies, per facies,
        on every ``every``-th sample of the well (top ``top`` features by overall mean)."""
        from facies_ml.lithofacies import summarize_contributions

        cfg = self.config
        well, X, have, missing = self._well_features(well)
        model = self.facies_model_
        if missing:
            model, _ = self.subset_models_.model_for(have, well=well.name)
        Xm = X.reindex(columns=model.feature_names_in_).iloc[:: max(1, int(every))]
        contrib = model.contributions(Xm)
        pred = model.predict_proba(Xm).argmax(axis=1)
        table = summarize_contributions(contrib, list(model.feature_names_in_), pred,
                                        cfg.facies.labels).head(top)
        return table.reset_index().assign(well=well.name)

