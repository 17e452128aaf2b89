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
from pathlib import Path
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin

from fracto.classes import MODES
from fracto.errors import FractoInputError
from fracto.modes.features import FEATURE_SET_VERSION

#: Marker stored in every fracto model.
MODEL_KIND = "fracto.modes.ModeClassifier"

#: Types a fracto model file may hold beyond skops' built-in safe set.
KNOWN_TYPES: frozenset[str] = frozenset(
    {
        "fracto.modes.model.ModeClassifier",
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

    def _base(self):
        from sklearn.ensemble import HistGradientBoostingClassifier

        return HistGradientBoostingClassifier(
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
        """
        from threadpoolctl import threadpool_limits

        with threadpool_limits(limits=self.n_threads):
            return self._fit(X, y, groups, feature_names)

    def _fit(self, X, y, groups, feature_names) -> ModeClassifier:
        from sklearn.calibration import CalibratedClassifierCV
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
        n_groups = len(np.unique(groups))
        method = self.calibration
        if method not in ("isotonic", "sigmoid", "none"):
            raise FractoInputError("calibration must be 'isotonic', 'sigmoid' or 'none'.")
        k = min(self.n_calibration_folds, n_groups)
        if method == "none" or k < 2:
            est = self._base().fit(X, y)
        else:
            cv = [
                (tr, te)
                for tr, te in GroupKFold(k).split(X, y, groups)
                if len(set(y[tr])) == len(present)
            ]
            if not cv:
                est = self._base().fit(X, y)
            else:
                est = CalibratedClassifierCV(self._base(), method=method, cv=cv, ensemble=True)
                est.fit(X, y)
                est.cv = len(cv)  # keep the file small: the fold indices are not needed
        self.estimator_ = est
        self.classes_ = np.asarray(present)
        self.n_features_in_ = X.shape[1]
        self.feature_names_ = list(feature_names) if feature_names is not None else None
        self.feature_set_version_ = FEATURE_SET_VERSION
        self.kind_ = MODEL_KIND
        return self

    def predict_proba(self, X: np.ndarray) -> np.ndarray:
        """Calibrated probabilities, columns in the order of ``classes_``."""
        X = np.asarray(X, dtype=np.float32)
        p = self.estimator_.predict_proba(X)
        order = [list(self.estimator_.classes_).index(c) for c in self.classes_]
        return p[:, order]

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

    if not hasattr(model, "estimator_"):
        raise FractoInputError("The model has not been trained yet.")
    write_bytes_atomic(path, sio.dumps(model))
    return sha256_of(path)


def load_model(path: str | os.PathLike, *, trust: bool = False) -> ModeClassifier:
    """Read a fracto model written by :func:`save_model`.

    The types the file holds are checked first (``skops.io.get_untrusted_types``);
    any type outside :data:`KNOWN_TYPES` is refused unless `trust` is True.

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
    try:
        untrusted = sio.get_untrusted_types(file=p)
    except Exception as exc:
        raise FractoInputError(
            f"'{p}' is not a fracto model file ({type(exc).__name__})."
        ) from exc
    unexpected = sorted(set(untrusted) - KNOWN_TYPES)
    if unexpected and not trust:
        raise FractoInputError(
            f"The model file '{p}' holds types fracto does not expect ({', '.join(unexpected)}); "
            "load it only if you trust its source, with --trust."
        )
    try:
        obj = sio.load(p, trusted=list(untrusted))
    except Exception as exc:
        raise FractoInputError(f"'{p}' could not be read as a fracto model ({exc}).") from exc
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
        "feature_importance": importance or {},
        "created_utc": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "library_versions": library_versions(),
        "seed": seed,
    }
    if extra:
        card.update(extra)
    out = card_path_for(model_path)
    write_json_atomic(out, card)
    return out
