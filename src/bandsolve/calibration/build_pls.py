"""Build PLS calibrations from calibration mixtures, with the component count chosen by CV."""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from bandsolve._threads import one_blas_thread
from bandsolve.calibration.build import (
    check_ceiling,
    outlier_record,
    provenance_record,
    training_arrays,
    with_merit,
)
from bandsolve.calibration.detail import LEVERAGE_FACTOR, Q_PER_LEVERAGE
from bandsolve.calibration.merit import blank_arrays
from bandsolve.calibration.model import Calibration
from bandsolve.calibration.records import ComponentChoice, EstimatorLimits, Limits, Selection
from bandsolve.concentrations import ConcentrationTable, groups_in_order
from bandsolve.crossval import cross_validate_pls, select_components
from bandsolve.cv_result import CVResult
from bandsolve.diagnostics import (
    ResidualLimit,
    q_limit_from_values,
    q_limit_jackson_mudholkar,
    residual_eigenvalues,
)
from bandsolve.errors import ModelError
from bandsolve.merit.statistics import noise_by_differences
from bandsolve.pls import PLSRegressor
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.progress import ProgressCallback, step
from bandsolve.score_diagnostics import leverage_limit, t2_limit
from bandsolve.spectra import DEFAULT_CEILING_AU, SpectralSet
from bandsolve.variance_function import effective_dof, fit_variance

__all__ = ["NO_Q_LEFT", "build_pls", "fit_pls_with_limits"]

#: How the missing Q limit of a model with as many components as spectral points is named;
#: its residual ratio is NaN and its results are flagged ``unchecked``.
NO_Q_LEFT = "not set: as many components as spectral points, no residual left to check"


def fit_pls_with_limits(Z: np.ndarray, Y: np.ndarray, *, components: int | str = "auto",
                        max_components: int = 15, cv: Any = "interleaved:10", groups=None,
                        select: str = "randomization", alpha: float = 0.05,
                        scale: bool = False, limit_alpha: float = 0.01,
                        q_limit: str = "box", leverage_factor: float = LEVERAGE_FACTOR,
                        random_state: int = 0
                        ) -> tuple[PLSRegressor, EstimatorLimits, ComponentChoice, np.ndarray]:
    """Cross-validate, choose the component count, fit, and set the diagnostic limits.

    Limits (all at ``limit_alpha``):

    * T²: the F-distribution limit for new samples (Tracy, Young & Mason 1992).
    * Q, ``q_limit="box"`` (default): Box's (1954) scaled χ² fitted by moments to the
      *cross-validated* Q values (Nomikos & MacGregor 1995), each divided by ``1 + h`` with
      h its held-out leverage, and the limit applies to ``Q/(1 + h)`` of new samples (a
      residual carries the loadings' error in proportion to ``1 + h``, as a CLS residual
      carries K̂'s; Haaland & Thomas 1988). Without the division, the few samples at the
      design's corners spread the Q values, the fitted χ² gets too few degrees of freedom and
      the limit too high: measured for this package (40 simulated PLS2 calibrations of 25
      mixtures, σ = 0.003 AU, α = 0.01), an unmodelled band with a visible part at the noise
      RMS was flagged in 94.8 % of samples (as low as 46 % in one calibration) against
      99.99 % (≥ 99.5 % in every calibration) with it; clean samples over the Q limit 0.4 %
      → 1.3 %. h is capped at ``p − A`` (:func:`q_limit_from_values`). Fitted Q values are
      shrunk toward the model (each sample helped fit it) and would flag too many routine
      samples.
      ``q_limit="jackson-mudholkar"``: the Jackson & Mudholkar (1979) limit from the
      eigenvalues of the calibration X residuals, rescaled so that their total equals the
      mean cross-validated Q. With fewer calibration samples than wavelengths the residual
      matrix has too few eigenvalues to describe new residuals and this limit is far too
      wide (measured, α = 0.05: 0.08 % false alarms at n = 40, p = 121; 3.2 % at n = 200,
      p = 40; the default gave 5.4 % and 4.3 %).
    * Leverage: 3(A + 1)/n (Hoaglin & Welsch 1978).
    * MSEC per analyte, ``Σ(y − ŷ)²/(n − A − 1)`` (recorded), and RMSECV at the chosen count,
      which sets the standard error (:func:`bandsolve.calibration.detail.pls_detail`).

    Returns
    -------
    model : PLSRegressor
    limits : EstimatorLimits
    selection : ComponentChoice
        Rule, chosen count and the CV evidence (RMSECV curve, p-values).
    studentized : ndarray, shape (n, m)
        Cross-validated errors at the chosen count times ``√(1 − h_i)`` (the leverage of each
        calibration sample), which have a common variance (Cook & Weisberg 1982), over the
        error SD ``RMSECV/√(1 + (A + 1)/n)``: the input of
        :func:`bandsolve.reference_outliers.reference_outliers`.
    """
    n = Z.shape[0]
    a_max = int(min(max_components, n - 2, Z.shape[1]))
    if a_max < 1:
        raise ModelError(f"{n} calibration samples are too few for PLS; measure more mixtures")
    cv_result = cross_validate_pls(Z, Y, a_max, cv=cv, scale=scale, groups=groups)
    chosen = select_components(cv_result, rule=select, alpha=alpha, random_state=random_state)
    if components == "auto":
        a = chosen.n_components
    else:
        a = int(components)
        if not 1 <= a <= a_max:
            raise ModelError(f"--components {a} is outside 1..{a_max} for {n} samples")
    model = PLSRegressor(n_components=a, scale=scale).fit(Z, Y)
    a = model.n_parameters - 1
    fitted = np.asarray(model.predict(Z)).reshape(n, -1)
    msec = np.sum((Y.reshape(n, -1) - fitted) ** 2, axis=0) / max(n - a - 1, 1)
    q = _q_limit(model, Z, cv_result, a, limit_alpha, q_limit)
    limits = EstimatorLimits(
        alpha=limit_alpha, residual=q.value, residual_method=q.method,
        residual_parameters=dict(q.parameters),
        t2=float(t2_limit(a, n, alpha=limit_alpha, kind="new")),
        leverage=float(leverage_limit(a, n, factor=leverage_factor)),
        msec=tuple(msec.tolist()), rmsecv=tuple(cv_result.rmsecv[a - 1].tolist()),
        **_noise_floor(model, Z),
        **(_run_error_model(cv_result, a, Y, groups) if cv == "groups" else {}))
    evidence = dict(chosen.evidence)
    evidence.update(rule=select if components == "auto" else f"fixed ({select} suggests "
                    f"{chosen.n_components})", alpha=alpha, n_components=a, cv=str(cv))
    sigma = cv_result.rmsecv[a - 1] / np.sqrt(1.0 + (a + 1) / n)  # as in pls_detail
    studentized = (cv_result.errors[a - 1] * np.sqrt(1.0 - model.leverage(Z))[:, None]
                   / np.where(sigma > 0, sigma, 1.0))
    return model, limits, ComponentChoice.from_dict(evidence), studentized


def _run_error_model(cv_result: CVResult, a: int, Y: np.ndarray,
                     groups: np.ndarray) -> dict[str, Any]:
    """Error model of a PLS calibration cross-validated by leaving whole runs (days) out.

    Errors a run shares (the day's gain, baseline, wavelength shift) show in the
    leave-one-run-out errors, but two ways the plain SE ``√((1 + h)σ²_e)`` would misread
    them: a gain error grows with the level, so a single σ²_e averaged over the levels is too
    small at the top of the range; and errors shared within runs carry about one degree of
    freedom per run, not one per sample. So, per analyte, the squared errors are fitted by
    maximum likelihood (:func:`bandsolve.variance_function.fit_variance`) to
    ``Var(e_i) = κ²(1 + h_i)σ²_e + γ²c_i²`` (κ, γ ≥ 0; h_i the held-out leverage, σ²_e as in
    :func:`bandsolve.calibration.detail.pls_detail`; the two-component error model of Rocke &
    Lorenzato 1995), and the t quantile takes the smallest Kish effective degrees of freedom
    over the analytes (:func:`bandsolve.variance_function.effective_dof`). Unlike the CLS
    error model (:func:`bandsolve.cls_loo.error_model`), whose base is the white-noise SE and
    so has a scale ≥ 1 and a relative part kept only when a test finds it, the base here is
    the cross-validated error itself: the two parts share it, as in a validation
    (:func:`bandsolve.evaluate.validated.model_error`), and the scale may fall below 1.
    """
    n = len(groups)
    e = cv_result.errors[a - 1]
    grow = 1.0 + cv_result.leverage(a - 1)
    s2e = cv_result.rmsecv[a - 1] ** 2 / (1.0 + (a + 1) / n)
    c = Y.reshape(n, -1)
    kappa, gamma, dofs = [], [], []
    for k in range(e.shape[1]):
        base = grow * s2e[k]
        tiny = 1e-9 * base  # keeps every variance positive while the fit starts
        cols = np.column_stack([base, c[:, k] ** 2])
        theta = fit_variance(e[:, k] ** 2, tiny, cols, 200, 1e-10)
        kappa.append(float(np.sqrt(theta[0])))
        gamma.append(float(np.sqrt(theta[1])))
        sd = np.sqrt(tiny + cols @ theta)
        dofs.append(effective_dof(e[:, k] / sd, groups))
    return {"error_scale": tuple(kappa), "relative_error": tuple(gamma),
            "error_scale_dof": int(np.floor(min(dofs))),
            "error_scale_runs": int(np.unique(groups).size)}


def _noise_floor(model: PLSRegressor, Z: np.ndarray) -> dict[str, Any]:
    """Prediction variance from spectral noise alone: ``Σ_j b_j² σ²_j`` per analyte.

    Faber & Kowalski (1997) propagate measurement noise through PLS as
    ``σ²(ŷ) ≈ (1 + h)(σ²_Δy + ‖b‖²σ²_Δx)`` for white noise; the ``‖b‖²σ²_Δx`` part is
    measured here with σ²_j from second differences of the calibration residuals
    (:func:`bandsolve.merit.statistics.noise_by_differences`), which smooth structure left in
    the residuals does not inflate. It is a floor: whatever else a prediction suffers
    (reference error, model error) only adds to it, while an RMSECV from n samples can fall
    well below it by chance and then makes that calibration's intervals too narrow. After
    Savitzky–Golay smoothing or derivatives the noise is correlated along the axis and
    differences see only part of it (measured for this package on white noise: 14–44 % of
    the variance for windows of 5–15 points), so the floor is then low and never widens an
    interval by mistake; the RMSECV term decides.
    """
    n, p = Z.shape
    a = model.n_parameters - 1
    dof = max((n - a - 1) * (p - a), 1)
    if p < 3:
        return {}
    E = model.residuals(Z, unscaled=True)
    sigma2 = noise_by_differences(E, n * p / dof)
    b = model.regression_vectors()
    return {"noise_floor": tuple((b**2 @ sigma2).tolist()), "noise_floor_dof": int(dof)}


def _q_limit(model: PLSRegressor, Z: np.ndarray, cv_result: CVResult, a: int, alpha: float,
             method: str) -> ResidualLimit:
    """The Q limit of one fitted model (see :func:`fit_pls_with_limits`)."""
    q_cv = cv_result.q_residuals[a - 1]
    if method == "box" and Z.shape[1] <= a:
        # The components span every used point: Q is zero up to rounding, nothing to check.
        return ResidualLimit("Q", NO_Q_LEFT, alpha, float("nan"))
    if method == "box":
        # A residual carries the loadings' estimation error in proportion to 1 + h, as a CLS
        # residual carries K̂'s (Haaland & Thomas 1988): the limit is set on Q/(1 + h).
        limit = q_limit_from_values(q_cv / (1.0 + cv_result.leverage(a - 1)), alpha=alpha,
                                    max_dof=Z.shape[1] - a)
        return dataclasses.replace(limit, method=Q_PER_LEVERAGE)
    if method != "jackson-mudholkar":
        raise ModelError(f"Q limit must be 'jackson-mudholkar' or 'box', not {method!r}")
    eig = residual_eigenvalues(model.residuals(Z))
    fitted_mean = eig.sum() * (len(Z) - 1) / len(Z)  # mean fitted Q
    return q_limit_jackson_mudholkar(eig * (np.mean(q_cv) / fitted_mean), alpha)


@one_blas_thread
def build_pls(spectra: SpectralSet, table: ConcentrationTable, *,
              components: int | str = "auto", max_components: int = 15,
              cv: Any = "interleaved:10", groups=None, select: str = "randomization",
              alpha: float = 0.05, mode: str = "pls2", scale: bool = False,
              window: list[tuple[float, float]] | None = None,
              savgol_window: int | None = None, savgol_polyorder: int = 2,
              derivative: int = 0, offset: bool = False, blank: SpectralSet | None = None,
              blanks: SpectralSet | None = None, limit_alpha: float = 0.01,
              q_limit: str = "box", ceiling: float = DEFAULT_CEILING_AU,
              leverage_factor: float = LEVERAGE_FACTOR,
              progress: ProgressCallback | None = None,
              provenance: dict[str, Any] | None = None) -> Calibration:
    """Build a PLS calibration from calibration mixtures.

    Parameters
    ----------
    spectra, table
        Calibration spectra and their known concentrations (matched by sample id).
    components : "auto" or int
        "auto" applies ``select`` to the cross-validation curve; an integer fixes the count
        (the curve and the rule's suggestion are still recorded).
    max_components : int
        Largest count tried (capped at n − 2 and p).
    cv : str or splitter
        ``contiguous:K``, ``interleaved:K``, ``random:K``, ``random:KxR``, ``loo`` or
        ``groups`` (with ``groups``); see :func:`bandsolve.crossval.make_splitter`.
    groups : mapping or pandas.Series, optional
        Group label of each sample, keyed by sample id (for example
        :func:`bandsolve.concentrations.group_labels`), keeping replicate spectra of one
        physical sample in one fold; a missing sample is an error naming it.
    select : {"randomization", "one-se", "min"}
        Component selection rule; ``alpha`` is the level of the randomization test.
    mode : {"pls2", "pls1"}
        One model for all analytes, or one model per analyte.
    scale : bool
        Autoscale wavelengths (usually off for spectra).
    window, savgol_window, savgol_polyorder, derivative, offset
        Row-wise preprocessing (:class:`~bandsolve.preprocess.SpectralPreprocessor`).
    blank, blanks : SpectralSet, optional
        ``blank`` is subtracted from every spectrum; ``blanks`` are replicate blanks for σx of
        the figures of merit (see :func:`bandsolve.calibration.build.build_cls`).
    limit_alpha : float
        Significance level of the T², Q and flag limits.
    q_limit : {"jackson-mudholkar", "box"}
        How the Q limit is set (see :func:`fit_pls_with_limits`).
    leverage_factor : float
        Leverage warning limit ``leverage_factor·(A + 1)/n`` (2 or 3 are usual).
    progress : callable, optional
        ``progress(done, total, label)`` after each model (one per analyte for PLS1).
    """
    if mode not in ("pls1", "pls2"):
        raise ModelError(f"mode must be 'pls1' or 'pls2', not {mode!r}")
    spectra, C = training_arrays(spectra, table, blank)
    if groups is not None:
        groups = groups_in_order(groups, spectra.sample_ids)
    pre = SpectralPreprocessor(axis=spectra.axis, window=window, savgol_window=savgol_window,
                               savgol_polyorder=savgol_polyorder, derivative=derivative,
                               offset=offset).fit(spectra.values)
    check_ceiling(spectra, pre.used_mask, ceiling)
    Z = pre.transform(spectra.values)
    targets = [C] if mode == "pls2" else [C[:, [k]] for k in range(C.shape[1])]
    models, limits, evidence, studentized = [], [], [], []
    for i, Y in enumerate(targets):
        model, lim, ev, z = fit_pls_with_limits(
            Z, Y, components=components, max_components=max_components, cv=cv, groups=groups,
            select=select, alpha=alpha, scale=scale, limit_alpha=limit_alpha, q_limit=q_limit,
            leverage_factor=leverage_factor)
        models.append(model)
        limits.append(lim)
        evidence.append(ev)
        studentized.append(z)
        step(progress, i + 1, len(targets), "cross-validating PLS")
    settings = {"mode": mode, "components": components, "max_components": max_components,
                "cv": str(cv), "select": select, "alpha": alpha, "scale": scale,
                "window": window, "savgol_window": savgol_window,
                "savgol_polyorder": savgol_polyorder, "derivative": derivative,
                "offset": offset, "limit_alpha": limit_alpha, "q_limit": q_limit,
                "blank_subtracted": blank is not None}
    cal = Calibration(
        method="pls", analytes=table.analytes, axis=spectra.axis, axis_unit=spectra.axis_unit,
        preprocessor=pre, estimators=models,
        calibrated_range=np.column_stack([C.min(axis=0), C.max(axis=0)]),
        settings=settings, path_length_cm=spectra.path_length_cm, ceiling=ceiling,
        limits=Limits(float(leverage_factor), tuple(limits)),
        selection=Selection(mode, tuple(evidence)),
        provenance=provenance_record(provenance, len(C)) | outlier_record(
            np.hstack(studentized), np.ones(C.shape[1]), spectra.sample_ids, table.analytes),
    )
    return with_merit(cal, spectra.values, C, blank_arrays(cal, blanks), Z)
