"""What bandsolve's estimators need of scikit-learn's base classes, without importing it.

scikit-learn costs about 1.5 s to import (it brings scipy.stats, scipy.sparse and pandas with
it), three times the rest of ``bandsolve build``. The estimator contract itself is small:
parameters read from the ``__init__`` signature (``get_params``/``set_params``), a
``__repr__``, ``score`` for regressors, ``fit_transform`` for transformers and the tags that
scikit-learn asks for. :class:`Estimator`, :class:`Regressor` and :class:`Transformer` give
those, imitating ``BaseEstimator``, ``RegressorMixin`` and ``TransformerMixin``; what only
scikit-learn itself calls (tags, the R² score) imports it inside the method.

Input checks stay scikit-learn's: :func:`validated` hands every input to ``validate_data``
unless it is already what that function would return unchanged (see its docstring), which is
what bandsolve's own readers produce. So users see scikit-learn's checks and messages, and the
command line builds a model without importing it.
"""

from __future__ import annotations

import copy
import inspect
from typing import Any

import numpy as np

__all__ = ["Estimator", "Regressor", "Transformer", "check_fitted", "clone", "validated"]


class Estimator:
    """Parameters from the ``__init__`` signature, as scikit-learn's ``BaseEstimator``."""

    @classmethod
    def _get_param_names(cls) -> list[str]:
        """Names of the ``__init__`` parameters, sorted (varargs are refused)."""
        if cls.__init__ is object.__init__:
            return []
        params = [p for p in inspect.signature(cls.__init__).parameters.values()
                  if p.name != "self" and p.kind != p.VAR_KEYWORD]
        if any(p.kind == p.VAR_POSITIONAL for p in params):
            raise RuntimeError(f"{cls.__name__} must list its parameters in __init__ "
                               "(no *args), as the scikit-learn estimator contract requires")
        return sorted(p.name for p in params)

    def get_params(self, deep: bool = True) -> dict[str, Any]:
        """Parameters of this estimator (and, with ``deep``, of estimators it contains)."""
        out: dict[str, Any] = {}
        for key in self._get_param_names():
            value = getattr(self, key)
            if deep and hasattr(value, "get_params") and not isinstance(value, type):
                out.update((f"{key}__{k}", v) for k, v in value.get_params().items())
            out[key] = value
        return out

    def set_params(self, **params: Any) -> Estimator:
        """Set parameters (``name`` or ``component__name`` for contained estimators)."""
        valid = self.get_params(deep=True)
        nested: dict[str, dict[str, Any]] = {}
        for key, value in params.items():
            key, delim, sub_key = key.partition("__")
            if key not in valid:
                raise ValueError(f"Invalid parameter {key!r} for estimator {self}. Valid "
                                 f"parameters are: {self._get_param_names()!r}.")
            if delim:
                nested.setdefault(key, {})[sub_key] = value
            else:
                setattr(self, key, value)
                valid[key] = value
        for key, sub_params in nested.items():
            valid[key].set_params(**sub_params)
        return self

    def __repr__(self) -> str:
        """``Name(param=value, ...)`` with the parameters that differ from their defaults."""
        defaults = {p.name: p.default
                    for p in inspect.signature(type(self).__init__).parameters.values()}
        shown = []
        for key, value in self.get_params(deep=False).items():
            if repr(value) == repr(defaults.get(key)):
                continue
            text = repr(value)
            if isinstance(value, np.ndarray) and len(text) > 60:
                text = f"<array of shape {value.shape}>"
            shown.append(f"{key}={text}")
        return f"{type(self).__name__}({', '.join(shown)})"

    @property
    def _repr_html_(self):
        """The diagram a notebook shows, as ``BaseEstimator`` gives it: defined only while
        scikit-learn's ``display`` option is ``"diagram"`` (its default)."""
        from sklearn import get_config

        if get_config()["display"] != "diagram":
            raise AttributeError("_repr_html_ is only defined when the 'display' configuration "
                                 "option is set to 'diagram'")
        return self._html

    def _repr_mimebundle_(self, **kwargs) -> dict[str, str]:
        """Plain text, and the diagram under ``display="diagram"``, for notebooks."""
        from sklearn import get_config

        output = {"text/plain": repr(self)}
        if get_config()["display"] == "diagram":
            output["text/html"] = self._html()
        return output

    def _html(self) -> str:
        from sklearn.utils import estimator_html_repr

        return estimator_html_repr(self)

    def __sklearn_tags__(self):
        """scikit-learn's default tags (only scikit-learn calls this, so it is imported)."""
        from sklearn.utils import InputTags, Tags, TargetTags

        return Tags(estimator_type=None, target_tags=TargetTags(required=False),
                    transformer_tags=None, regressor_tags=None, classifier_tags=None,
                    input_tags=InputTags())


class Regressor:
    """``score`` (R²) and regressor tags, as scikit-learn's ``RegressorMixin``."""

    def score(self, X, y, sample_weight=None) -> float:
        """Coefficient of determination R² of ``predict(X)`` against ``y``.

        Computed by ``sklearn.metrics.r2_score`` (uniform average over analytes), as
        ``RegressorMixin.score`` does.
        """
        from sklearn.metrics import r2_score

        return float(r2_score(y, self.predict(X), sample_weight=sample_weight))

    def __sklearn_tags__(self):
        """Regressor tags on top of the base tags."""
        from sklearn.utils import RegressorTags

        tags = super().__sklearn_tags__()
        tags.estimator_type = "regressor"
        tags.regressor_tags = RegressorTags()
        tags.target_tags.required = True
        return tags


class Transformer:
    """``fit_transform`` and transformer tags, as scikit-learn's ``TransformerMixin``."""

    def fit_transform(self, X, y=None, **fit_params) -> np.ndarray:
        """``fit(X, y)`` then ``transform(X)``."""
        return self.fit(X, y, **fit_params).transform(X)

    def __sklearn_tags__(self):
        """Transformer tags on top of the base tags."""
        from sklearn.utils import TransformerTags

        tags = super().__sklearn_tags__()
        tags.transformer_tags = TransformerTags()
        return tags


def clone(estimator):
    """A new, unfitted estimator with the same parameters (as ``sklearn.base.clone``).

    bandsolve's estimators are rebuilt from deep copies of their parameters (none of which is
    an estimator); any other object goes to scikit-learn's ``clone``.
    """
    if isinstance(estimator, Estimator):
        params = estimator.get_params(deep=False)
        return type(estimator)(**{k: copy.deepcopy(v) for k, v in params.items()})
    from sklearn.base import clone as sklearn_clone

    return sklearn_clone(estimator)


def check_fitted(estimator, attribute: str) -> None:
    """Raise scikit-learn's ``NotFittedError`` (its message) when ``attribute`` is missing."""
    if not hasattr(estimator, attribute):
        from sklearn.exceptions import NotFittedError

        raise NotFittedError(f"This {type(estimator).__name__} instance is not fitted yet. "
                             "Call 'fit' with appropriate arguments before using this "
                             "estimator.")


#: validate_data's keywords whose effect :func:`validated` reproduces for clean arrays.
_CLEAN_KEYWORDS = {"dtype": (np.float64, "numeric"), "multi_output": (True,),
                   "y_numeric": (True, False), "ensure_min_samples": None}


def _clean(a, ndims: tuple[int, ...]) -> bool:
    return (type(a) is np.ndarray and a.dtype == np.float64 and a.ndim in ndims
            and a.size > 0 and bool(np.isfinite(a).all()))


def validated(estimator, X, y="no_validation", *, reset: bool = True, **kwargs):
    """scikit-learn's ``validate_data(estimator, X, y, reset=reset, **kwargs)``.

    When the inputs are already what it would return unchanged — a float64 ``numpy.ndarray``
    X of shape (n, p) with n ≥ ``ensure_min_samples`` and p ≥ 1, a float64 y of shape (n,)
    or (n, m), all finite, the width the estimator was fitted with (``reset=False``, no
    feature names seen) — they are returned as they are, and with ``reset`` the estimator
    records ``n_features_in_`` as ``validate_data`` does. Everything else (lists,
    DataFrames, other dtypes, NaN, wrong shapes) goes to ``validate_data``, which checks,
    converts, warns and raises as usual.
    """
    no_y = isinstance(y, str) and y == "no_validation"
    clean = (set(kwargs) <= set(_CLEAN_KEYWORDS)
             and all(_CLEAN_KEYWORDS[k] is None or v in _CLEAN_KEYWORDS[k]
                     for k, v in kwargs.items())
             and _clean(X, (2,)) and X.shape[0] >= kwargs.get("ensure_min_samples", 1)
             and (no_y or (_clean(y, (1, 2)) and len(y) == len(X))))
    if clean and reset:
        estimator.n_features_in_ = X.shape[1]
        vars(estimator).pop("feature_names_in_", None)
    elif clean:
        clean = (getattr(estimator, "n_features_in_", None) == X.shape[1]
                 and not hasattr(estimator, "feature_names_in_"))
    if not clean:
        from sklearn.utils.validation import validate_data

        return validate_data(estimator, X, y, reset=reset, **kwargs)
    return X if no_y else (X, y)
