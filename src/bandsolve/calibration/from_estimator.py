"""From a fitted scikit-learn estimator to a bandsolve calibration with limits and merit.

People who fit a CLS or PLS model in their own scikit-learn code (optionally in a
``Pipeline`` after bandsolve's :class:`~bandsolve.preprocess.SpectralPreprocessor`) get bare
arrays: no diagnostic limits, no figures of merit, no model file. This module reads the
estimator's settings, rebuilds the calibration the bandsolve way from the same training data
(so limits, standard errors and figures of merit are set exactly as ``bandsolve build`` sets
them) and checks that the rebuilt model predicts what the user's estimator predicts.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.calibration.model import Calibration
from bandsolve.cls import CLSRegressor
from bandsolve.concentrations import ConcentrationTable, align
from bandsolve.errors import ModelError
from bandsolve.pls import PLSRegressor
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.spectra import SpectralSet

__all__ = ["AGREEMENT", "calibration_from_estimator"]

#: Largest difference allowed between the estimator's and the rebuilt model's predictions,
#: relative to the range of each analyte's reference values.
AGREEMENT = 1e-6


def _steps(estimator: Any) -> tuple[SpectralPreprocessor | None, Any]:
    steps = getattr(estimator, "steps", None)
    if steps is None:
        return None, estimator
    *before, (_, final) = steps
    pre = [step for _, step in before if step not in (None, "passthrough")]
    if len(pre) > 1 or (pre and not isinstance(pre[0], SpectralPreprocessor)):
        names = ", ".join(type(s).__name__ for s in pre)
        raise ModelError(f"the pipeline's steps before the model ({names}) cannot be "
                         "recorded in a model file; use at most one "
                         "bandsolve.preprocess.SpectralPreprocessor")
    return (pre[0] if pre else None), final


def _pls_settings(final: Any) -> dict[str, Any]:
    if isinstance(final, PLSRegressor):
        return {"components": int(final.n_components), "scale": bool(final.scale)}
    module = type(final).__module__
    if type(final).__name__ == "PLSRegression" and module.startswith("sklearn."):
        return {"components": int(final.n_components), "scale": bool(final.scale)}
    raise ModelError(f"{type(final).__name__} is not a CLS or PLS model; give a fitted "
                     "bandsolve CLSRegressor or PLSRegressor, or scikit-learn's PLSRegression "
                     "(optionally in a Pipeline)")


def calibration_from_estimator(estimator: Any, spectra: SpectralSet,
                               table: ConcentrationTable, *,
                               blanks: SpectralSet | None = None,
                               provenance: dict[str, Any] | None = None) -> Calibration:
    """A bandsolve calibration (limits, figures of merit, model file ready) from a fitted
    scikit-learn estimator and the data it was fitted on.

    Parameters
    ----------
    estimator : fitted estimator or Pipeline
        :class:`~bandsolve.cls.CLSRegressor`, :class:`~bandsolve.pls.PLSRegressor` or
        ``sklearn.cross_decomposition.PLSRegression`` (one model for all analytes), alone or
        as the last step of a ``Pipeline`` whose only earlier step is a
        :class:`~bandsolve.preprocess.SpectralPreprocessor`.
    spectra : SpectralSet, n spectra
        The training spectra, absorbance on the axis the estimator was fitted on.
    table : ConcentrationTable
        Their reference concentrations (matched by sample id), columns in the order of the
        estimator's targets.
    blanks : SpectralSet, optional
        Replicate blank spectra for the noise σx of the figures of merit.
    provenance : dict, optional
        Extra provenance kept in the model (labels, file fingerprints).

    Returns
    -------
    Calibration
        Built by :func:`~bandsolve.calibration.build.build_cls` or
        :func:`~bandsolve.calibration.build_pls.build_pls` with the estimator's settings
        (PLS with the estimator's component count, the cross-validation curve still
        recorded); its provenance records the estimator and the largest disagreement found.

    Raises
    ------
    ModelError
        An estimator or pipeline step that cannot be recorded, preprocessing CLS cannot
        take, or a rebuilt model that predicts differently from the estimator (more than
        :data:`AGREEMENT` of an analyte's range).

    References
    ----------
    Haaland, D. M. & Thomas, E. V. (1988). Partial least-squares methods for spectral
    analyses. 1. Relation to other quantitative calibration methods and the extraction of
    qualitative information. Anal. Chem. 60, 1193–1202.
    """
    pre, final = _steps(estimator)
    spectra, table = align(spectra, table)
    options: dict[str, Any] = {}
    if pre is not None:
        options = {"window": pre.window, "savgol_window": pre.savgol_window,
                   "savgol_polyorder": pre.savgol_polyorder, "derivative": pre.derivative,
                   "offset": pre.offset}
    prov = {**(provenance or {}), "from_estimator": repr(estimator)}
    if isinstance(final, CLSRegressor):
        if any(options.get(k) for k in ("savgol_window", "derivative", "offset")):
            raise ModelError("a CLS model takes a window only, not smoothing, derivatives or "
                             "offsets (they change the pure spectra it is built from)")
        cal = build_cls(spectra, table, intercept=final.fit_intercept, baseline=final.baseline,
                        window=options.get("window"), blanks=blanks, alpha=final.alpha,
                        provenance=prov)
    else:
        cal = build_pls(spectra, table, blanks=blanks, provenance=prov,
                        max_components=_pls_settings(final)["components"],
                        **_pls_settings(final), **options)
    theirs = np.asarray(estimator.predict(np.asarray(spectra.values)), dtype=float)
    ours = cal.detail(cal.align(spectra).X).concentrations
    span = np.ptp(np.asarray(table.values, dtype=float), axis=0)
    gap = np.max(np.abs(theirs.reshape(ours.shape) - ours) / np.where(span > 0, span, 1.0))
    if not gap <= AGREEMENT:
        raise ModelError(f"the rebuilt model predicts up to {gap:.2g} of an analyte's range "
                         "away from the estimator; was it fitted on these spectra and "
                         "concentrations, in this order? (scikit-learn's PLSRegression fits "
                         "several analytes only approximately: use bandsolve.pls.PLSRegressor)")
    return cal
