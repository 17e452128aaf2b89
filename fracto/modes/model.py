"""The fracture-mode estimator, its skops files and its model card.

:class:`ModeClassifier` follows scikit-learn's estimator shape: explicit
constructor parameters, ``fit(X, y, groups)``, ``predict_proba(X)``,
``predict(X)`` and ``classes_``. Inside it a histogram gradient-boosting
classifier is wrapped in probability calibration whose folds are grouped by
image, so the calibrated probabilities are not fitted on tiles of the very
images they are calibrated against.

Models are written with ``skops.io.dump`` and read with ``skops.io.load`` after
checking ``skops.io.get_untrusted_types``: only the types a fracto model is
known to hold are accepted, anything else needs an explicit ``trust=True``.
Pickle and joblib are never used.

References
----------
.. [1] Ke, G. et al. (2017). LightGBM: a highly efficient gradient boosting decision
   tree. NeurIPS 30 (the histogram algorithm behind sklearn's
   HistGradientBoostingClassifier).
.. [2] Zadrozny, B., Elkan, C. (2002). Transforming classifier scores into accurate
   multiclass probability estimates. KDD, 694-699 (isotonic calibration).
.. [3] Platt, J. (1999). Probabilistic outputs for support vector machines.
   Advances in Large Margin Classifiers, 61-74 (sigmoid calibration).
"""

from __future__ import annotations

import hashlib
import os
import platform
import zipfile
import zlib
from pathlib import Path
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.ensemble import HistGradientBoostingClassifier

from fracto.classes import MODES
from fracto.errors import FractoInputError
from fracto.modes.features import FEATURE_SET_VERSION

#: Marker stored in every fracto model.
MODEL_KIND = "fracto.modes.ModeClassifier"

#: Version of what a fitted model holds beyond the estimator (held-out confusion,
#: feature references); models without it give uncorrected fractions only.
CONTRACT_VERSION = 1

#: Training percentiles of each feature kept for explanations.
REFERENCE_PERCENTILES = (5.0, 25.0, 50.0, 75.0, 95.0)

#: Types a fracto model file may hold beyond skops' built-in safe set.
KNOWN_TYPES: frozenset[str] = frozenset(
    {
        "fracto.modes.model.ModeClassifier",
        "fracto.modes.model.UnweightedBinsBooster",
        "sklearn.calibration._CalibratedClassifier",
        "sklearn.calibration.CalibratedClassifierCV",
        "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
        "sklearn.ensemble._hist_gradient_boosting.binning._BinMapper",
        "sklearn.ensemble._hist_gradient_boosting.gradient_boosting.HistGradientBoostingClassifier",
        "sklearn._loss.loss.HalfMultinomialLoss",
        "sklearn._loss.loss.HalfBinomialLoss",
        "sklearn._loss.link.MultinomialLogit",
        "sklearn._loss.link.LogitLink",
        "sklearn._loss.link.Interval",
        "sklearn.isotonic.IsotonicRegression",
        "sklearn.calibration._SigmoidCalibration",
        "sklearn.preprocessing._label.LabelEncoder",
        "sklearn.utils._bunch.Bunch",
        "numpy.float64",
        "numpy.float32",
        "numpy.int64",
        "numpy.int32",
        "numpy.dtype",
        "numpy.ndarray",
        "numpy.random._generator.Generator",
        "builtins.slice",
    }
)


class ModeClassifier(ClassifierMixin, BaseEstimator):
    """Calibrated fracture-mode classifier of region feature vectors.

    Parameters
    ----------
    classes : sequence of str or None
        Class names in label order; label index ``i + 1`` in a mask means
        ``classes[i]``. None: fracto's modes (:data:`fracto.classes.MODES`).
    threshold : float
        A region whose best calibrated probability is below this is
        ``unclassified``.
    scale_um : float or None
        Physical texture scale (µm) used to set the filter scales on calibrated
        images; None makes the model scale-free (texture scale from each image).
    max_iter, learning_rate, max_leaf_nodes, l2_regularization : see
        sklearn.ensemble.HistGradientBoostingClassifier.
    calibration : {"isotonic", "sigmoid", "none"}
        Probability calibration on held-out image groups.
    n_calibration_folds : int
        Number of grouped folds for the calibration.
    random_state : int
        Seed of the boosting (subsampling for early stopping is off).
    uses_height : bool
        The feature vectors include the height-map features.
    n_threads : int or None
        Limit of OpenMP threads while fitting (None: the library default; the
        default 1 avoids thread contention on shared machines).
        One thread is often faster on a shared, busy machine.
    class_weight : "balanced" or None
        Weight regions inversely to their class's frequency (see
        HistGradientBoostingClassifier), so a class seen in few regions still counts.
    n_importance_repeats : int
        Permutations per feature for the held-out permutation importance
        (0: none).
    max_importance_regions : int
        Held-out regions per fold used for the permutation importance.
    ensemble : bool
        True: predictions average the calibrated fold boosters (k boosters per
        prediction). False (default): one more booster is fitted on all regions
        and calibrated with the fold boosters' out-of-fold scores, as
        ``CalibratedClassifierCV(ensemble=False)`` does; a prediction then costs
        one booster. The fold boosters are kept either way (held-out scores,
        member disagreement in :mod:`fracto.modes.suggest`).

    Attributes
    ----------
    boosters_ : list of HistGradientBoostingClassifier
        One booster per grouped calibration fold, each fitted without its fold.
    final_booster_ : HistGradientBoostingClassifier or None
        The booster fitted on all regions (``ensemble=False``), used by
        :meth:`predict_proba`; None when the fold boosters are averaged.
    calibrators_ : list or None
        One-vs-rest calibrators fitted on every out-of-fold decision score.
    confusion_ : ndarray (k, k) or None
        Held-out area confusion pooled over images: rows true class, columns
        predicted (argmax) class, in blocks (see ``confusion_source_``).
    confusion_per_group_ : ndarray (n_images, k, k) or None
        The same for each held-out image.
    confusion_groups_ : list of str
        Image (group) of each ``confusion_per_group_`` entry.
    confidence_per_group_ : ndarray (n_images,)
        Area-weighted mean best probability of each held-out image.
    feature_reference_ : ndarray (n_features,)
        Training median of each feature.
    feature_quantiles_ : ndarray (5, n_features)
        Training percentiles :data:`REFERENCE_PERCENTILES` of each feature.
    feature_importance_ : ndarray (n_features,) or None
        Held-out permutation importance (drop in region accuracy).

    Notes
    -----
    Calibration and cross-validation share the folds: booster ``i`` is fitted
    without fold ``i``; its decision scores on fold ``i`` are out of fold. The
    model's calibrators are fitted on all out-of-fold scores; the model then
    predicts with one booster refitted on all regions through those
    calibrators (``ensemble=False``, as ``CalibratedClassifierCV`` with
    ``ensemble=False``), or averages the calibrated fold boosters
    (``ensemble=True``, as ``CalibratedClassifierCV`` with ``ensemble=True`` but
    with a pooled calibrator). For the held-out scores,
    fold ``i`` is predicted by booster ``i`` with calibrators fitted on the
    other folds' scores only, so neither part has seen the fold: the
    confusion matrix costs no extra booster fit.
    """

    def __init__(
        self,
        classes: tuple[str, ...] | list[str] | None = None,
        *,
        threshold: float = 0.5,
        scale_um: float | None = None,
        max_iter: int = 100,
        learning_rate: float = 0.1,
        max_leaf_nodes: int = 15,
        l2_regularization: float = 0.0,
        calibration: str = "isotonic",
        n_calibration_folds: int = 3,
        random_state: int = 0,
        uses_height: bool = False,
        n_threads: int | None = 1,
        class_weight: str | None = "balanced",
        n_importance_repeats: int = 2,
        max_importance_regions: int = 2000,
        ensemble: bool = False,
    ):
        self.classes = classes
        self.threshold = threshold
        self.scale_um = scale_um
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.l2_regularization = l2_regularization
        self.calibration = calibration
        self.n_calibration_folds = n_calibration_folds
        self.random_state = random_state
        self.uses_height = uses_height
        self.n_threads = n_threads
        self.class_weight = class_weight
        self.n_importance_repeats = n_importance_repeats
        self.max_importance_regions = max_importance_regions
        self.ensemble = ensemble

    def _base(self):
        return UnweightedBinsBooster(
            max_iter=self.max_iter,
            learning_rate=self.learning_rate,
            max_leaf_nodes=self.max_leaf_nodes,
            l2_regularization=self.l2_regularization,
            early_stopping=False,
            class_weight=self.class_weight,
            random_state=self.random_state,
        )

    @property
    def class_names(self) -> tuple[str, ...]:
        return tuple(self.classes) if self.classes is not None else MODES

    def fit(
        self,
        X: np.ndarray,
        y: np.ndarray,
        groups: np.ndarray | None = None,
        *,
        feature_names: list[str] | None = None,
        score_images=None,
        sample_weight: np.ndarray | None = None,
        score_groups=None,
    ) -> ModeClassifier:
        """Fit on region features.

        Parameters
        ----------
        X : ndarray, shape (n_regions, n_features)
        y : array of str, shape (n_regions,)
            Class name of each region (one of `classes`).
        groups : array, shape (n_regions,)
            Image of each region; calibration folds never split an image.
        feature_names : list of str, optional
            Column names, kept for explanations and the model card.
        score_images : sequence of fracto.modes.scoring.HeldOutImage, optional
            Every tile and the true class area of every block of the training
            images; the held-out confusion is then scored on whole images
            (mixed boundary tiles included). Without them it is scored on the
            labelled training tiles.
        sample_weight : array, shape (n_regions,), optional
            Weight of each region in the boosting and in the calibration (on
            top of `class_weight`); the held-out confusion still counts
            regions, not weights.
        score_groups : collection of group ids, optional
            Only these images enter the held-out confusion (for a model adapted
            from a base model: the new material's images, so that corrected
            fractions use the error rates on the new material). None: all.
        """
        from threadpoolctl import threadpool_limits

        with threadpool_limits(limits=self.n_threads):
            return self._fit(
                X, y, groups, feature_names, score_images, sample_weight, score_groups
            )

    def _fit(
        self, X, y, groups, feature_names, score_images, sample_weight=None, score_groups=None
    ) -> ModeClassifier:
        from sklearn.model_selection import GroupKFold

        X = np.asarray(X, dtype=np.float32)
        y = np.asarray(y).astype(str)
        names = self.class_names
        unknown = sorted(set(y) - set(names))
        if unknown:
            raise FractoInputError(f"Training labels {unknown} are not among the classes {names}.")
        present = [c for c in names if c in set(y)]
        if len(present) < 2:
            raise FractoInputError("Training needs regions of at least two classes.")
        if groups is None:
            groups = np.arange(len(y))
        groups = np.asarray(groups)
        sw = None
        if sample_weight is not None:
            sw = np.asarray(sample_weight, dtype=np.float64)
            if sw.shape != y.shape or not np.all(np.isfinite(sw)) or np.any(sw < 0):
                raise FractoInputError(
                    "The region weights must be one finite, non-negative number per region."
                )
        n_groups = len(np.unique(groups))
        method = self.calibration
        if method not in ("isotonic", "sigmoid", "none"):
            raise FractoInputError("calibration must be 'isotonic', 'sigmoid' or 'none'.")
        self.classes_ = np.asarray(present)
        self.n_features_in_ = X.shape[1]
        self.feature_names_ = list(feature_names) if feature_names is not None else None
        self.feature_set_version_ = FEATURE_SET_VERSION
        self.kind_ = MODEL_KIND
        self.contract_version_ = CONTRACT_VERSION
        self.feature_reference_ = np.median(X, axis=0).astype(np.float64)
        self.feature_quantiles_ = np.percentile(X, REFERENCE_PERCENTILES, axis=0).astype(
            np.float64
        )
        self.reference_percentiles_ = [float(v) for v in REFERENCE_PERCENTILES]
        self.confusion_ = None
        self.confusion_per_group_ = None
        self.confusion_groups_ = None
        self.confidence_per_group_ = None
        self.confusion_source_ = None
        self.feature_importance_ = None
        self.n_cv_folds_ = 0
        self.final_booster_ = None
        k = min(self.n_calibration_folds, n_groups)
        folds = []
        if method != "none" and k >= 2:
            folds = [
                (tr, te)
                for tr, te in GroupKFold(k).split(X, y, groups)
                if len(set(y[tr])) == len(present)
            ]
        if not folds:
            self.boosters_ = [self._base().fit(X, y, sample_weight=sw)]
            self.calibrators_ = None
            return self
        # one booster per grouped fold; its scores on the held-out fold are out of fold
        boosters, scores = [], np.zeros((len(y), len(present) if len(present) > 2 else 1))
        oof = np.zeros(len(y), dtype=bool)
        fold_of = np.full(len(y), -1)
        for i, (tr, te) in enumerate(folds):
            b = self._base().fit(X[tr], y[tr], sample_weight=None if sw is None else sw[tr])
            boosters.append(b)
            scores[te] = _raw_scores(b, X[te], self.classes_)
            oof[te] = True
            fold_of[te] = i
        self.boosters_ = boosters
        if not self.ensemble:
            self.final_booster_ = self._base().fit(X, y, sample_weight=sw)
        # the final calibrator sees every out-of-fold score (boosters are exchangeable)
        self.calibrators_ = _fit_calibrators(
            scores[oof], y[oof], self.classes_, method, None if sw is None else sw[oof]
        )
        self.n_cv_folds_ = len(folds)
        # honest held-out probabilities: booster i on fold i, calibrated without fold i
        # (with a single usable fold there is nothing else to calibrate on: that fold's
        # held-out scores then use the calibrator fitted on it, which flatters them)
        cal_wo = [
            _fit_calibrators(
                scores[oof & (fold_of != i)],
                y[oof & (fold_of != i)],
                self.classes_,
                method,
                None if sw is None else sw[oof & (fold_of != i)],
            )
            if np.any(oof & (fold_of != i))
            else self.calibrators_
            for i in range(len(folds))
        ]
        fold_groups = [set(np.unique(groups[te]).tolist()) for _, te in folds]
        self._score_held_out(
            X, y, groups, folds, scores, cal_wo, fold_groups, score_images, score_groups
        )
        return self

    # -------------------------------------------------------- held-out scoring

    def _held_out_proba(self, i: int, X: np.ndarray, cal_wo) -> np.ndarray:
        return _calibrated(self.boosters_[i], cal_wo[i], X, self.classes_)

    def _score_held_out(
        self, X, y, groups, folds, scores, cal_wo, fold_groups, score_images, score_groups=None
    ):
        nk = len(self.classes_)
        index = {c: i for i, c in enumerate(self.classes_)}
        per_group, ids, conf = [], [], []
        if score_images:
            # whole held-out images: every tile (mixed boundary tiles too) → blocks → areas
            from fracto.modes.regions import tiles_to_blocks

            for img in score_images:
                g = img.group
                if score_groups is not None and g not in score_groups:
                    continue
                fi = next((i for i, fg in enumerate(fold_groups) if g in fg), None)
                if fi is None:  # never trained on by any booster: any fold is held out
                    fi = zlib.crc32(str(g).encode()) % len(folds)
                truth = np.asarray(img.block_truth, dtype=np.float64)
                if truth.shape[2] != nk:
                    truth = _truth_for_classes(truth, self.class_names, self.classes_)
                if not truth.sum() > 0:
                    continue
                p = self._held_out_proba(fi, np.asarray(img.X, np.float32), cal_wo)
                pb = tiles_to_blocks(p, img.tile_grid)
                pred = pb.argmax(axis=2)
                cm = np.zeros((nk, nk))
                for j in range(nk):
                    cm[:, j] = truth[pred == j].sum(axis=0)
                per_group.append(cm)
                ids.append(str(g))
                w = truth.sum(axis=2)
                conf.append(float((pb.max(axis=2) * w).sum() / w.sum()))
            self.confusion_source_ = (
                "whole held-out images: every block, area of each true class (in blocks)"
            )
        else:
            # only the labelled training tiles: each tile counts as one region
            for i, (_, te) in enumerate(folds):
                p = self._held_out_proba(i, X[te], cal_wo)
                pred = p.argmax(axis=1)
                yi = np.array([index[c] for c in y[te]])
                for g in np.unique(groups[te]):
                    if score_groups is not None and g not in score_groups:
                        continue
                    sel = groups[te] == g
                    cm = np.zeros((nk, nk))
                    np.add.at(cm, (yi[sel], pred[sel]), 1.0)
                    per_group.append(cm)
                    ids.append(str(g))
                    conf.append(float(p[sel].max(axis=1).mean()))
            self.confusion_source_ = "labelled training tiles of held-out images (one per tile)"
        if per_group:
            self.confusion_per_group_ = np.stack(per_group)
            self.confusion_ = self.confusion_per_group_.sum(axis=0)
            self.confusion_groups_ = ids
            self.confidence_per_group_ = np.asarray(conf, dtype=np.float64)
        if self.n_importance_repeats > 0:
            self.feature_importance_ = self._held_out_importance(X, y, folds, cal_wo)

    def _held_out_importance(self, X, y, folds, cal_wo) -> np.ndarray:
        """Permutation importance: drop of held-out region accuracy per feature."""
        from sklearn.inspection import permutation_importance

        rng = np.random.default_rng(self.random_state)
        out = np.zeros(X.shape[1])
        for i, (_, te) in enumerate(folds):
            if te.size > self.max_importance_regions:
                te = np.sort(rng.choice(te, self.max_importance_regions, replace=False))

            def acc(est, Xs, ys, i=i):
                p = self._held_out_proba(i, Xs, cal_wo)
                return float((self.classes_[p.argmax(axis=1)] == ys).mean())

            r = permutation_importance(
                _NoFit(),
                X[te],
                y[te],
                scoring=acc,
                n_repeats=self.n_importance_repeats,
                random_state=self.random_state + i,
            )
            out += r.importances_mean * te.size
        return out / sum(min(te.size, self.max_importance_regions) for _, te in folds)

    def cv_summary(self) -> dict[str, Any]:
        """The stored held-out confusion as a card-ready dict (None when absent)."""
        if getattr(self, "confusion_", None) is None:
            return {}
        cm = np.asarray(self.confusion_)
        rows = cm.sum(axis=1)
        labels = [str(c) for c in self.classes_]
        recall = {
            c: float(cm[i, i] / rows[i]) if rows[i] > 0 else None for i, c in enumerate(labels)
        }
        return {
            "scheme": f"{self.n_cv_folds_}-fold grouped by image (the calibration folds)",
            "scored_model": "calibrated: booster of the fold, calibrator fitted without the fold",
            "source": self.confusion_source_,
            "labels": labels,
            "area_confusion": np.round(cm, 2).tolist(),
            "area_recall": recall,
            "area_accuracy": float(np.trace(cm) / cm.sum()) if cm.sum() > 0 else None,
            "n_images_scored": len(self.confusion_groups_ or []),
        }

    @property
    def estimator_(self):
        """The calibration ensemble (``calibrated_classifiers_``, ``classes_``).

        Models written before the held-out contract hold a
        ``CalibratedClassifierCV`` here; newer ones expose their calibrated
        boosters through the same two attributes.
        """
        d = self.__dict__
        if "estimator_" in d:
            return d["estimator_"]
        if "boosters_" not in d:
            raise AttributeError("estimator_")
        return _Ensemble(self)

    def member_proba(self, X: np.ndarray) -> np.ndarray:
        """Probabilities of each calibrated booster, shape (n_members, n, n_classes)."""
        X = np.asarray(X, dtype=np.float32)
        members = getattr(self.estimator_, "calibrated_classifiers_", None)
        if not members:
            return self.predict_proba(X)[None]
        order = [list(self.estimator_.classes_).index(c) for c in self.classes_]
        return np.stack([m.predict_proba(X)[:, order] for m in members])

    def predict_proba(self, X: np.ndarray) -> np.ndarray:
        """Calibrated probabilities, columns in the order of ``classes_``."""
        from threadpoolctl import threadpool_limits

        X = np.asarray(X, dtype=np.float32)
        with threadpool_limits(limits=self.n_threads):
            if not hasattr(self, "boosters_"):  # a model written before the contract
                p = self.estimator_.predict_proba(X)
                order = [list(self.estimator_.classes_).index(c) for c in self.classes_]
                return p[:, order]
            if self.calibrators_ is None:
                b = self.boosters_[0]
                order = [list(b.classes_).index(c) for c in self.classes_]
                return b.predict_proba(X)[:, order]
            final = getattr(self, "final_booster_", None)
            if final is not None:
                return _calibrated(final, self.calibrators_, X, self.classes_)
            p = np.zeros((len(X), len(self.classes_)))
            for b in self.boosters_:
                p += _calibrated(b, self.calibrators_, X, self.classes_)
            return p / len(self.boosters_)

    def predict(self, X: np.ndarray, *, threshold: float | None = None) -> np.ndarray:
        """Class names, ``"unclassified"`` where the best probability is under the threshold."""
        from fracto.classes import UNCLASSIFIED

        p = self.predict_proba(X)
        thr = self.threshold if threshold is None else threshold
        out = self.classes_[p.argmax(axis=1)].astype(object)
        out[p.max(axis=1) < thr] = UNCLASSIFIED
        return out.astype(str)

    def predict_best(self, X: np.ndarray) -> np.ndarray:
        """Most probable class, with no threshold (for scores)."""
        return self.classes_[self.predict_proba(X).argmax(axis=1)]


class UnweightedBinsBooster(HistGradientBoostingClassifier):
    """HistGradientBoostingClassifier whose bin edges ignore the sample weights.

    The weights still scale every gradient and hessian; only the candidate
    split points (feature quantiles) come from the unweighted data.
    scikit-learn 1.9 finds weighted bin edges with one weighted percentile
    per bin and feature, and ``class_weight="balanced"`` makes every fit a
    weighted one: 14.5 s per fit of 3647 regions of 228 features instead of
    0.2 s here (measured on this project's test set). Unweighted edges are what
    scikit-learn used before 1.6; every fracto booster uses them.
    """

    def _bin_data(self, X, sample_weight, is_training_data):
        return super()._bin_data(X, None, is_training_data)


class _Member:
    """One calibrated booster of a model (for code that walks the ensemble)."""

    def __init__(self, booster, calibrators, classes):
        self.estimator = booster
        self.calibrators = calibrators
        self.classes = classes

    def predict_proba(self, X):
        if self.calibrators is None:
            order = [list(self.estimator.classes_).index(c) for c in self.classes]
            return self.estimator.predict_proba(X)[:, order]
        return _calibrated(
            self.estimator, self.calibrators, np.asarray(X, np.float32), self.classes
        )


class _Ensemble:
    """Read-only view of a model's boosters as ``calibrated_classifiers_``."""

    def __init__(self, model):
        self._model = model
        self.classes_ = model.classes_
        cal = model.calibrators_
        self.calibrated_classifiers_ = (
            [_Member(b, cal, model.classes_) for b in model.boosters_] if cal is not None else []
        )

    def predict_proba(self, X):
        return self._model.predict_proba(X)


class _NoFit:
    """Stand-in estimator for permutation_importance with a callable scorer."""

    def fit(self, *a, **k):  # pragma: no cover - never refitted
        return self


def _raw_scores(booster, X: np.ndarray, classes: np.ndarray) -> np.ndarray:
    """Decision scores in the order of `classes` (one column for two classes)."""
    s = booster.decision_function(X)
    if s.ndim == 1:
        return s.reshape(-1, 1) if list(booster.classes_) == list(classes) else -s.reshape(-1, 1)
    order = [list(booster.classes_).index(c) for c in classes]
    return s[:, order]


def _fit_calibrators(
    scores: np.ndarray,
    y: np.ndarray,
    classes: np.ndarray,
    method: str,
    sample_weight: np.ndarray | None = None,
):
    """One-vs-rest calibrators of the decision scores (as CalibratedClassifierCV).

    References
    ----------
    Zadrozny & Elkan (2002) for isotonic, Platt (1999) for sigmoid; the
    one-vs-rest layout and normalisation follow sklearn.calibration.
    """
    from sklearn.calibration import _SigmoidCalibration
    from sklearn.isotonic import IsotonicRegression

    out = []
    cols = [classes[1]] if scores.shape[1] == 1 else list(classes)
    for j, c in enumerate(cols):
        t = (y == c).astype(np.float64)
        if method == "isotonic":
            cal = IsotonicRegression(out_of_bounds="clip").fit(scores[:, j], t, sample_weight)
        else:
            cal = _SigmoidCalibration().fit(scores[:, j], t, sample_weight)
        out.append(cal)
    return out


def _calibrated(booster, calibrators, X: np.ndarray, classes: np.ndarray) -> np.ndarray:
    """Calibrated, normalised probabilities of one booster."""
    s = _raw_scores(booster, X, classes)
    k = len(classes)
    if s.shape[1] == 1:
        p1 = np.clip(calibrators[0].predict(s[:, 0]), 0.0, 1.0)
        return np.column_stack([1.0 - p1, p1])
    p = np.column_stack([cal.predict(s[:, j]) for j, cal in enumerate(calibrators)])
    den = p.sum(axis=1, keepdims=True)
    return np.divide(p, den, out=np.full_like(p, 1.0 / k), where=den > 0)


def _truth_for_classes(truth: np.ndarray, names, present) -> np.ndarray:
    """Keep the truth columns of the classes the model learned (by name order)."""
    idx = [list(names).index(c) for c in present]
    return truth[..., idx]


# ---------------------------------------------------------------- files


def sha256_of(path: str | os.PathLike) -> str:
    """SHA-256 hex digest of a file."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def save_model(model: ModeClassifier, path: str | os.PathLike) -> str:
    """Write a fitted model with skops (atomically); return the file's sha256."""
    import skops.io as sio

    from fracto.io.safe import write_bytes_atomic

    if not hasattr(model, "classes_"):
        raise FractoInputError("The model has not been trained yet.")
    write_bytes_atomic(path, sio.dumps(model))
    return sha256_of(path)


def load_model(path: str | os.PathLike, *, trust: bool = False) -> ModeClassifier:
    """Read a fracto model written by :func:`save_model`.

    skops checks every type the file holds while loading; any type outside
    :data:`KNOWN_TYPES` is refused unless `trust` is True.

    Raises
    ------
    FractoInputError
        If the file is missing, not a skops file, not a fracto model, holds
        unexpected types (without `trust`), or was made for another feature-set
        version.
    """
    import skops.io as sio

    p = Path(path)
    if not p.is_file():
        raise FractoInputError(f"The model file '{p}' does not exist.")
    if not zipfile.is_zipfile(p):
        raise FractoInputError(f"'{p}' is not a fracto model file (not a skops archive).")
    from skops.io.exceptions import UntrustedTypesFoundException

    # One pass over the file: skops refuses any type outside the list while loading;
    # only then (or with `trust`) is the file walked a second time to name the types.
    try:
        if trust:
            obj = sio.load(p, trusted=sio.get_untrusted_types(file=p))
        else:
            obj = sio.load(p, trusted=sorted(KNOWN_TYPES))
    except UntrustedTypesFoundException as exc:
        try:
            unexpected = sorted(set(sio.get_untrusted_types(file=p)) - KNOWN_TYPES)
        except Exception:  # the first error already says enough
            unexpected = []
        names = ", ".join(unexpected) or str(exc)
        raise FractoInputError(
            f"The model file '{p}' holds types fracto does not expect ({names}); "
            "load it only if you trust its source, with --trust."
        ) from exc
    except Exception as exc:
        raise FractoInputError(
            f"'{p}' is not a fracto model file ({type(exc).__name__})."
        ) from exc
    if not isinstance(obj, ModeClassifier) or getattr(obj, "kind_", None) != MODEL_KIND:
        raise FractoInputError(f"'{p}' is a skops file but not a fracto mode model.")
    version = getattr(obj, "feature_set_version_", None)
    if version != FEATURE_SET_VERSION:
        raise FractoInputError(
            f"The model '{p}' was made for feature set '{version}' but this fracto computes "
            f"'{FEATURE_SET_VERSION}'; retrain it with 'fracto train'."
        )
    return obj


#: File name of the default model.
DEFAULT_MODEL_NAME = "fracto-default.skops"


def default_model_path() -> Path:
    """Where the default model is found.

    In order: the ``FRACTO_MODEL`` environment variable; ``fracto/models_data/``
    inside the installed package; ``models/`` at the top of a source tree.

    Raises
    ------
    FractoInputError
        If none of them holds a model.
    """
    env = os.environ.get("FRACTO_MODEL")
    if env:
        return Path(env)
    here = Path(__file__).resolve()
    candidates = [
        here.parents[1] / "models_data" / DEFAULT_MODEL_NAME,
        here.parents[2] / "models" / DEFAULT_MODEL_NAME,
    ]
    for c in candidates:
        if c.is_file():
            return c
    raise FractoInputError(
        "No default mode model was found; give --model PATH, set FRACTO_MODEL, or build it "
        "with 'python -m fracto.modes.default_model --out models/'."
    )


def library_versions() -> dict[str, str]:
    """Versions of the libraries a model depends on."""
    import scipy
    import skimage
    import sklearn
    import skops

    from fracto import __version__

    return {
        "fracto": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "scikit-image": skimage.__version__,
        "scikit-learn": sklearn.__version__,
        "skops": skops.__version__,
    }


def model_importance(model: ModeClassifier, top: int | None = 25) -> dict[str, float]:
    """The model's held-out permutation importance, largest first (empty when absent)."""
    imp = getattr(model, "feature_importance_", None)
    names = getattr(model, "feature_names_", None)
    if imp is None or not names:
        return {}
    ranked = sorted(zip(names, (float(v) for v in imp), strict=True), key=lambda kv: -kv[1])
    return dict(ranked[:top] if top else ranked)


def card_path_for(model_path: str | os.PathLike) -> Path:
    """Model card path beside a model: ``name.skops`` -> ``name.card.json``."""
    p = Path(model_path)
    return p.with_name(p.name.removesuffix(".skops") + ".card.json")


def write_model_card(
    model_path: str | os.PathLike,
    model: ModeClassifier,
    *,
    training: dict[str, Any],
    scores: dict[str, Any] | None = None,
    importance: dict[str, float] | None = None,
    seed: int | None = None,
    extra: dict[str, Any] | None = None,
) -> Path:
    """Write the model card JSON beside a saved model and return its path.

    The card holds the classes, the feature-set version and feature list, the
    training-data summary, the grouped cross-validation scores (confusion
    matrix, per-class recall), global permutation importance, the date,
    library versions, the seed and the model file's sha256.
    """
    import datetime as _dt

    from fracto.io.safe import write_json_atomic
    from fracto.modes.features import FEATURE_DESCRIPTIONS, HEIGHT_FEATURE_DESCRIPTIONS

    desc = {**FEATURE_DESCRIPTIONS, **HEIGHT_FEATURE_DESCRIPTIONS}
    names = model.feature_names_ or []
    if not importance:
        importance = model_importance(model)
    card = {
        "kind": MODEL_KIND,
        "model_file": Path(model_path).name,
        "sha256": sha256_of(model_path),
        "classes": list(model.classes_),
        "feature_set_version": model.feature_set_version_,
        "features": {n: desc.get(n, "") for n in names},
        "settings": {k: v for k, v in model.get_params().items() if k != "classes"},
        "training_data": training,
        "cross_validation": scores or {},
        "held_out_area_confusion": model.cv_summary() if hasattr(model, "cv_summary") else {},
        "feature_importance": importance or {},
        "held_out_permutation_importance": {
            "method": "drop of held-out region accuracy when a feature is permuted, on the "
            "grouped calibration folds (Breiman 2001; sklearn.inspection)",
            "top": model_importance(model),
        },
        "created_utc": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "library_versions": library_versions(),
        "seed": seed,
    }
    if extra:
        card.update(extra)
    out = card_path_for(model_path)
    write_json_atomic(out, card)
    return out
