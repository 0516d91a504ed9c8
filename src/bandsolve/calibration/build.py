"""Build calibrations from spectra and concentrations (the API behind ``bandsolve build``)."""

from __future__ import annotations

import dataclasses
import os
import platform
import warnings
from collections.abc import Mapping
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from bandsolve import __version__
from bandsolve._threads import one_blas_thread
from bandsolve.calibration.detail import CLS_LEVERAGE_FACTOR
from bandsolve.calibration.merit import blank_arrays, merit_from_arrays
from bandsolve.calibration.model import Calibration
from bandsolve.calibration.modelfile import sha256_file
from bandsolve.calibration.records import EstimatorLimits, Limits
from bandsolve.cls import CLSRegressor
from bandsolve.cls_loo import cross_validated_error_scale, leave_runs_out
from bandsolve.concentrations import ConcentrationTable, align, groups_in_order
from bandsolve.errors import BandsolveError, BandsolveWarning, DataError, ModelError, where
from bandsolve.merit.statistics import noise_from_blanks
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.spectra import DEFAULT_CEILING_AU, SpectralSet

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["build_cls", "build_cls_from_absorptivities", "check_ceiling", "file_fingerprints",
           "library_versions", "outlier_record", "provenance_record", "training_arrays",
           "with_merit"]


def library_versions() -> dict[str, str]:
    """Versions of bandsolve, Python and the numerical libraries, for provenance records.

    scikit-learn's is read from its installed metadata: importing it would cost a building
    command about 1.5 s.
    """
    from importlib.metadata import version

    import numpy
    import pandas
    import scipy

    return {
        "bandsolve": __version__, "python": platform.python_version(),
        "numpy": numpy.__version__, "scipy": scipy.__version__,
        "scikit-learn": version("scikit-learn"), "pandas": pandas.__version__,
    }


def file_fingerprints(files: Mapping[str, str | os.PathLike[str] | None]) -> list[dict[str, str]]:
    """``{"role", "name", "sha256"}`` of each given file that exists, for ``training_files``.

    Parameters
    ----------
    files : mapping
        Role (``"spectra"``, ``"concentrations"``, ``"blanks"``, ...) → path or None.
    """
    return [{"role": role, "name": Path(path).name, "sha256": sha256_file(path)}
            for role, path in files.items() if path and Path(path).is_file()]


def outlier_record(errors: np.ndarray, standard_errors: np.ndarray, sample_ids, analytes
                   ) -> dict[str, Any]:
    """``{"reference_outliers": [...]}`` for the provenance: calibration samples whose stated
    concentration disagrees with their spectrum (:mod:`bandsolve.reference_outliers`)."""
    from bandsolve.reference_outliers import reference_outliers

    found = reference_outliers(errors, standard_errors, sample_ids, analytes)
    return {"reference_outliers": [o.to_dict() for o in found]}


def provenance_record(extra: dict[str, Any] | None, n_samples: int) -> dict[str, Any]:
    """Creation time, library versions and sample count, plus ``extra`` (file fingerprints)."""
    record = {
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "versions": library_versions(),
        "n_calibration_samples": n_samples,
    }
    record.update(extra or {})
    return record


def training_arrays(spectra: SpectralSet, table: ConcentrationTable,
                    blank: SpectralSet | None = None) -> tuple[SpectralSet, np.ndarray]:
    """Absorbance spectra matched to the concentration rows, with an optional blank removed."""
    spectra = spectra.to_absorbance()
    spectra.check_quantity()
    if blank is not None:
        spectra = spectra.subtract_blank(blank.on_grid(spectra.axis, spectra.axis_unit))
    spectra, table = align(spectra, table)
    return spectra, np.asarray(table.values)


#: Calibration residuals this many times the blank noise mean the model misses something.
RESIDUAL_NOISE_FACTOR = 3.0


def _check_residual_noise(est: CLSRegressor, blank_sd: float, source: str | None) -> None:
    """Warn when CLS calibration residuals are far above the noise of replicate blanks.

    CLS needs every absorber in the model; when one is missing (or a baseline effect), the
    calibration residuals carry its spectrum and are much larger than instrument noise, yet
    the residual limit, set from those same residuals, cannot see it.
    """
    residual_sd = float(np.sqrt(est.calibration_variance))
    if np.isfinite(residual_sd) and residual_sd > RESIDUAL_NOISE_FACTOR * blank_sd:
        warnings.warn(
            f"{where(source)}CLS calibration residuals ({residual_sd:.3g} AU) are "
            f"{residual_sd / blank_sd:.0f}× the noise of the replicate blanks "
            f"({blank_sd:.3g} AU): an absorber or a baseline effect is missing from the "
            "model; add it, try --baseline offset|linear, or compare with PLS "
            "(bandsolve compare)", BandsolveWarning, stacklevel=3)


def check_ceiling(spectra: SpectralSet, mask: np.ndarray, ceiling: float) -> None:
    """Refuse calibration spectra above the photometric ceiling inside the used range."""
    over = np.max(spectra.values[:, mask], axis=1) > ceiling
    if over.any():
        ids = [s for s, o in zip(spectra.sample_ids, over, strict=True) if o]
        raise DataError(
            f"{where(spectra.source)}{len(ids)} calibration spectra exceed the photometric "
            f"ceiling of {ceiling:g} AU in the used range ({', '.join(ids[:5])}); dilute them, "
            "narrow the window, or raise the ceiling if your instrument is linear there"
        )


@one_blas_thread
def build_cls(spectra: SpectralSet, table: ConcentrationTable, *, intercept: bool = False,
              baseline: str = "none", window: list[tuple[float, float]] | None = None,
              blank: SpectralSet | None = None, blanks: SpectralSet | None = None,
              alpha: float = 0.01, ceiling: float = DEFAULT_CEILING_AU,
              leverage_factor: float = CLS_LEVERAGE_FACTOR,
              provenance: dict[str, Any] | None = None,
              non_negative: bool = False,
              runs: Mapping[str, object] | pd.Series | None = None) -> Calibration:
    """Build a CLS calibration from standards or calibration mixtures.

    Parameters
    ----------
    spectra : SpectralSet
        Calibration spectra (absorbance or transmittance; converted to absorbance).
    table : ConcentrationTable
        Known concentrations; sample ids must match the spectra exactly. Pure standards are
        rows with one non-zero concentration; blanks are rows of zeros.
    intercept : bool
        Estimate a background spectrum shared by all samples.
    baseline : {"none", "offset", "linear", "quadratic"}
        Baseline terms solved with the concentrations at prediction.
    window : list of (low, high), optional
        Axis ranges to use.
    blank : SpectralSet, optional
        Blank spectra whose mean is subtracted from every calibration spectrum. Routine
        spectra must then be blank-corrected the same way (record it in the provenance).
    blanks : SpectralSet, optional
        Replicate blank spectra for the instrumental noise σx of the figures of merit (LOD,
        LOQ, γ); without them σx is estimated from calibration residuals and labelled so.
    alpha : float
        Significance level of the spectral-residual limit.
    ceiling : float
        Photometric ceiling in AU; calibration spectra above it are refused.
    leverage_factor : float
        Leverage flag limit as a multiple of the largest leverage inside the calibrated
        ranges (1: any composition with every analyte inside its range passes).
    provenance : dict, optional
        Extra provenance (training-file fingerprints, labels) stored with the model.
    non_negative : bool
        Predict concentrations constrained to be ≥ 0 (see :class:`~bandsolve.cls.CLSRegressor`).
    runs : mapping or pandas.Series, optional
        Run (day) of each calibration sample keyed by sample id, when the calibration was
        measured on 3 or more days: the error model that widens the SE
        (:func:`bandsolve.cls_loo.error_model`) is then fitted to leave-one-run-out errors
        (:func:`bandsolve.cls_loo.leave_runs_out`) with the runs' effective degrees of
        freedom, so that intervals include the day-to-day error the calibration itself
        shows. Without runs, to leave-one-out errors.
    """
    if not (np.isfinite(leverage_factor) and leverage_factor > 0):
        raise ModelError(f"leverage factor must be a positive number, not {leverage_factor}")
    spectra, C = training_arrays(spectra, table, blank)
    pre = SpectralPreprocessor(axis=spectra.axis, window=window).fit(spectra.values)
    check_ceiling(spectra, pre.used_mask, ceiling)
    Z = pre.transform(spectra.values)
    est = CLSRegressor(fit_intercept=intercept, baseline=baseline, wavelengths=pre.used_axis,
                       alpha=alpha, non_negative=non_negative).fit(Z, C)
    settings = {"intercept": intercept, "baseline": baseline, "window": window,
                "alpha": alpha, "blank_subtracted": blank is not None,
                "non_negative": non_negative}
    calibrated_range = np.column_stack([C.min(axis=0), C.max(axis=0)])
    if runs is None:
        scale, relative, scale_dof = est.error_scale()
        n_runs = 0
    else:
        labels = groups_in_order(runs, list(spectra.sample_ids))
        scale, relative, scale_dof = cross_validated_error_scale(
            *leave_runs_out(est, Z, C, labels), C, labels)
        n_runs = int(np.unique(labels).size)
    limits = Limits(float(leverage_factor), (EstimatorLimits(
        alpha=alpha, residual=est.residual_limit,
        residual_method=est.residual_method(), residual_parameters=est.residual_parameters(),
        leverage=est.leverage_limit(leverage_factor, calibrated_range),
        error_scale=tuple(scale.tolist()), relative_error=tuple(relative.tolist()),
        error_scale_dof=scale_dof, error_scale_runs=n_runs),))
    cal = Calibration(
        method="cls", analytes=table.analytes, axis=spectra.axis, axis_unit=spectra.axis_unit,
        preprocessor=pre, estimators=[est], calibrated_range=calibrated_range,
        settings=settings, path_length_cm=spectra.path_length_cm, ceiling=ceiling,
        limits=limits, provenance=provenance_record(provenance, len(C)) | _cls_outliers(
            est, C, spectra.sample_ids, table.analytes),
    )
    blank_x = blank_arrays(cal, blanks)
    if blank_x is not None:
        _check_residual_noise(est, float(noise_from_blanks(pre.transform(blank_x))),
                              spectra.source)
    return with_merit(cal, spectra.values, C, blank_x, Z)


def _cls_outliers(est: CLSRegressor, C: np.ndarray, sample_ids, analytes) -> dict[str, Any]:
    """Reference-value outliers from the closed-form leave-one-out errors of a CLS fit."""
    loo = est.leave_one_out()
    if loo is None:
        return {"reference_outliers": []}
    return outlier_record(loo.concentrations - C, loo.standard_errors, sample_ids, analytes)


def with_merit(cal: Calibration, X: np.ndarray | None, C: np.ndarray | None,
               blank_x: np.ndarray | None, Z: np.ndarray | None = None) -> Calibration:
    """The calibration with its figures of merit stored, from the arrays it was built from.

    ``X`` (absorbance on the model grid), ``Z`` (preprocessed) and ``C`` are the builder's own
    arrays, so nothing is aligned or preprocessed a second time
    (:func:`bandsolve.calibration.merit.merit_from_arrays`). When the data cannot support the
    figures (for example no replicate blanks and no residual degrees of freedom to estimate
    the noise), the model is still built; the reason is kept in
    ``provenance["merit_note"]`` and ``merit`` stays None.
    """
    try:
        merit = merit_from_arrays(cal, X, C, blank_x, Z=Z)
    except BandsolveError as exc:
        note = f"figures of merit not computed: {exc}"
        return dataclasses.replace(cal, provenance={**cal.provenance, "merit_note": note})
    return dataclasses.replace(cal, merit=merit)


def _validated_ranges(labels: tuple[str, ...],
                      stated: Mapping[str, tuple[float, float]]) -> np.ndarray:
    """(m, 2) ranges in label order; (0, ∞) where none is stated, with a warning."""
    unknown = [k for k in stated if k not in labels]
    if unknown:
        raise DataError(f"validated range for {', '.join(unknown)}: no such component in the "
                        f"absorptivity table; its labels are {', '.join(labels)}")
    ranges = np.array([stated.get(a, (0.0, np.inf)) for a in labels], dtype=float)
    bad = [a for a, (lo, hi) in zip(labels, ranges, strict=True) if not 0 <= lo < hi]
    if bad:
        raise DataError(f"validated range of {', '.join(bad)}: give 0 <= low < high")
    open_ended = [a for a in labels if a not in stated]
    if open_ended:
        warnings.warn(f"no validated range stated for {', '.join(open_ended)}: only negative "
                      "results are range-flagged; state the range shown to follow Beer's law "
                      "(--validated-range \"name=low-high unit\")", BandsolveWarning, stacklevel=3)
    return ranges


def build_cls_from_absorptivities(absorptivities: SpectralSet, path_length_cm: float, *,
                                  baseline: str = "none",
                                  window: list[tuple[float, float]] | None = None,
                                  validated_range: Mapping[str, tuple[float, float]]
                                  | None = None,
                                  blanks: SpectralSet | None = None,
                                  ceiling: float = DEFAULT_CEILING_AU,
                                  provenance: dict[str, Any] | None = None,
                                  alpha: float = 0.01) -> Calibration:
    """Build a CLS model from an absorptivity table and a path length, with no standards.

    ``K = ε·b``: the pure spectrum of each component per unit concentration in a cell of
    ``path_length_cm``. The component labels become the analyte labels. Without standards
    there are no calibration residuals, so the spectral-residual limit is unknown and the
    standard error comes from each spectrum's own residual alone.

    Parameters
    ----------
    validated_range : mapping of analyte label to (low, high), optional
        The range over which each analyte has been shown to follow Beer's law (from your
        validation), keyed by the table's labels (``"dye A [mg/L]"``); results outside it are
        flagged ``above_range``/``below_range``. An analyte without a stated range is open
        upwards (0 to ∞, only negative results are flagged) and a warning says so.
    blanks : SpectralSet, optional
        Replicate blank spectra; with them the figures of merit (σx, LOD, LOQ) are stored.
    alpha : float
        Significance level of the residual limit set from the blanks.
    """
    if absorptivities.quantity != "absorptivity":
        raise ModelError(f"{where(absorptivities.source)}expected an absorptivity table")
    if not (np.isfinite(path_length_cm) and path_length_cm > 0):
        raise ModelError("path length must be a positive number of cm")
    pre = SpectralPreprocessor(axis=absorptivities.axis, window=window).fit(
        absorptivities.values)
    K = pre.transform(absorptivities.values) * path_length_cm
    noise = blank_x = None
    if blanks is None:
        warnings.warn("no replicate blank spectra: the model has no residual limit, so an "
                      "unmodelled absorber will not be flagged; give --blanks", BandsolveWarning,
                      stacklevel=2)
    else:
        blank_x = blanks.on_grid(absorptivities.axis, absorptivities.axis_unit).values
        noise = noise_from_blanks(pre.transform(blank_x))
    est = CLSRegressor.from_pure_spectra(
        K, baseline=baseline, wavelengths=pre.used_axis, alpha=alpha,
        noise_sd=None if noise is None else noise.sigma,
        noise_dof=None if noise is None else noise.dof)
    ranges = _validated_ranges(absorptivities.sample_ids, validated_range or {})
    cal = Calibration(
        method="cls", analytes=absorptivities.sample_ids, axis=absorptivities.axis,
        axis_unit=absorptivities.axis_unit, preprocessor=pre, estimators=[est],
        calibrated_range=ranges,
        settings={"from_absorptivities": True, "baseline": baseline, "window": window,
                  "path_length_cm": path_length_cm},
        path_length_cm=path_length_cm, ceiling=ceiling,
        limits=Limits(CLS_LEVERAGE_FACTOR, (EstimatorLimits(
            alpha=float("nan") if noise is None else est.alpha, residual=est.residual_limit,
            residual_method="none (no calibration residuals, no blanks)" if noise is None else
            "F(p-m-q, (r-1)p): residual variance over the noise of r replicate blanks"),)),
        provenance=provenance_record(provenance, 0),
    )
    return cal if blank_x is None else with_merit(cal, None, None, blank_x)
