"""Statistics shared by figures of merit and diagnostics.

Input checking at the public boundary; noise estimates, the statistics of predicted against
reference values (:func:`regression_statistics`) and the single-wavelength baseline
(:func:`univariate_calibration`).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from bandsolve._distributions import f_sf, t_quantile, t_sf
from bandsolve.errors import DataError

__all__ = [
    "NoiseEstimate",
    "RegressionStatistics",
    "UnivariateCalibration",
    "as_float_array",
    "check_alpha",
    "noise_from_blanks",
    "noise_by_differences",
    "noise_from_residuals",
    "regression_statistics",
    "univariate_calibration",
]


def as_float_array(values: object, name: str, ndim: int | tuple[int, ...]) -> np.ndarray:
    """Return ``values`` as a finite float64 array of the allowed dimensionality.

    Raises :class:`~bandsolve.errors.DataError` naming the argument and the fix.
    """
    allowed = (ndim,) if isinstance(ndim, int) else ndim
    try:
        array = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise DataError(f"{name}: values must be numbers ({exc}); remove text entries.") from exc
    if array.ndim not in allowed:
        raise DataError(
            f"{name}: expected an array with {' or '.join(map(str, allowed))} dimension(s), "
            f"got shape {array.shape}; reshape the input."
        )
    bad = ~np.isfinite(array)
    if bad.any():
        first = tuple(int(i) for i in np.argwhere(bad)[0])
        raise DataError(
            f"{name}: non-finite value at index {first}; remove or replace missing values."
        )
    return array


def check_alpha(alpha: float) -> float:
    if not 0.0 < alpha < 1.0:
        raise DataError(f"alpha = {alpha!r} is not a probability; use a value such as 0.05.")
    return float(alpha)


@dataclass(frozen=True)
class NoiseEstimate:
    """Spectral noise standard deviation σx with where it came from.

    Attributes
    ----------
    sigma : float
        Per-channel noise SD (AU).
    origin : str
        ``"blank replicates"`` or ``"residuals"``.
    dof : int
        Degrees of freedom behind the estimate.
    """

    sigma: float
    origin: str
    dof: int

    def __float__(self) -> float:
        return self.sigma


def noise_from_blanks(blank_spectra: object) -> NoiseEstimate:
    """σx from replicate blank spectra: per-channel SD (ddof=1), combined as RMS over channels.

    Parameters
    ----------
    blank_spectra : array_like, shape (r, p)
        ``r >= 2`` repeated blank spectra (AU).

    References
    ----------
    Olivieri, A. C. et al. (2006). Uncertainty estimation and figures of merit for multivariate
    calibration. Pure Appl. Chem. 78, 633-661.
    """
    blanks = as_float_array(blank_spectra, "blank_spectra", 2)
    r, p = blanks.shape
    if r < 2:
        raise DataError(f"blank_spectra has {r} spectrum; measure at least 2 blank replicates.")
    variance = np.var(blanks, axis=0, ddof=1)
    return NoiseEstimate(float(np.sqrt(variance.mean())), "blank replicates", (r - 1) * p)


def noise_from_residuals(residuals: object, dof: int) -> NoiseEstimate:
    """σx = sqrt(‖E‖²_F / dof) from model residuals.

    Parameters
    ----------
    residuals : array_like, shape (n, p)
        Spectral residuals (AU).
    dof : int
        Total residual degrees of freedom of the matrix, e.g. ``p (n - m')`` for CLS.

    References
    ----------
    Haaland, D. M. & Thomas, E. V. (1988). Anal. Chem. 60, 1193-1202.
    """
    e = as_float_array(residuals, "residuals", 2)
    if dof < 1:
        raise DataError(f"dof = {dof} must be a positive number of degrees of freedom.")
    return NoiseEstimate(float(np.sqrt(np.sum(e**2) / dof)), "residuals", int(dof))


def noise_by_differences(residuals: object, dof_factor: float = 1.0) -> np.ndarray:
    """White-noise variance at each wavelength from second differences along the axis.

    A second difference ``e[j−1] − 2e[j] + e[j+1]`` of independent noise of variance σ²_j has
    variance ``σ²_{j−1} + 4σ²_j + σ²_{j+1} ≈ 6σ²_j``, while smooth structure left in the
    residuals (a broad band, a baseline) nearly cancels, so the estimate is not inflated by
    systematic variation that a residual norm would count as noise (von Neumann et al. 1941,
    the mean square successive difference; the second-difference form is common practice).

    Parameters
    ----------
    residuals : array_like, shape (n, p)
        Spectral residuals of n samples on p ordered wavelengths (AU), p ≥ 3.
    dof_factor : float
        ``n/(residual degrees of freedom per wavelength)`` correction, e.g.
        ``n p / ((n − A − 1)(p − A))`` for an A-component model with a mean.

    Returns
    -------
    ndarray, shape (p,)
        σ²_j in AU² (the end points take their neighbours' values).
    """
    e = as_float_array(residuals, "residuals", 2)
    if e.shape[1] < 3:
        raise DataError("at least 3 wavelengths are needed to estimate noise by differences")
    inner = np.mean((e[:, :-2] - 2.0 * e[:, 1:-1] + e[:, 2:]) ** 2, axis=0) / 6.0
    return np.concatenate([inner[:1], inner, inner[-1:]]) * float(dof_factor)


@dataclass(frozen=True)
class RegressionStatistics:
    """Agreement of predicted with reference values (units of the analyte).

    Attributes
    ----------
    n : int
        Number of samples.
    rmse_kind : str
        ``"RMSEC"`` (``sqrt(sum e^2 / (n - n_parameters))``) or ``"RMSEP"`` (``sqrt(sum e^2 / n)``).
    rmse : float
        Root-mean-square error, convention given by ``rmse_kind``.
    n_parameters : int or None
        Parameters used for the degrees of freedom of an RMSEC.
    bias : float
        Mean of ``y_pred - y_true``.
    bias_t, bias_p : float
        ``t = |bias| sqrt(n) / SEP`` and its two-sided p-value on ``n - 1`` df.
    sep : float
        Bias-corrected standard error of prediction, ``n - 1`` denominator.
    r2 : float
        ``1 - sum e^2 / sum (y - mean y)^2`` (Q² when the predictions are cross-validated).
    rpd : float
        ``SD(y_true) / SEP``.
    slope, intercept : float
        OLS line ``y_pred = intercept + slope * y_true``.
    slope_ci, intercept_ci : tuple of float
        ``(1 - alpha)`` confidence intervals (t on ``n - 2`` df).
    line_f, line_p : float
        Joint F-test of ``slope = 1`` and ``intercept = 0`` on (2, ``n - 2``) df.
    alpha : float
        Level of the confidence intervals.
    """

    n: int
    rmse_kind: str
    rmse: float
    n_parameters: int | None
    bias: float
    bias_t: float
    bias_p: float
    sep: float
    r2: float
    rpd: float
    slope: float
    slope_ci: tuple[float, float]
    intercept: float
    intercept_ci: tuple[float, float]
    line_f: float
    line_p: float
    alpha: float

    def to_dict(self) -> dict[str, object]:
        """Return the fields as a JSON-serialisable dictionary."""
        out = asdict(self)
        out["slope_ci"] = list(self.slope_ci)
        out["intercept_ci"] = list(self.intercept_ci)
        return out


def regression_statistics(
    y_true: object, y_pred: object, n_parameters: int | None = None, alpha: float = 0.05
) -> RegressionStatistics:
    """Compare predicted with reference concentrations of one analyte.

    Parameters
    ----------
    y_true, y_pred : array_like, shape (n,)
        Reference and predicted concentrations (same units).
    n_parameters : int, optional
        When given the RMSE is an RMSEC with ``n - n_parameters`` degrees of freedom (``A + 1``
        for PLS, ``m'`` for CLS, a convention); otherwise an RMSEP/RMSECV ``sqrt(sum e^2 / n)``.
    alpha : float
        Level of the confidence intervals of slope and intercept.

    Returns
    -------
    RegressionStatistics

    References
    ----------
    Olivieri, A. C. et al. (2006). Uncertainty estimation and figures of merit for multivariate
    calibration. Pure Appl. Chem. 78, 633-661.
    """
    y = as_float_array(y_true, "y_true", 1)
    yhat = as_float_array(y_pred, "y_pred", 1)
    alpha = check_alpha(alpha)
    n = y.size
    if yhat.size != n:
        raise DataError(f"y_true has {n} values but y_pred has {yhat.size}; pass matching arrays.")
    if n < 3 or np.ptp(y) == 0.0:
        raise DataError("need at least 3 samples with differing reference values for statistics.")
    dof = n if n_parameters is None else n - int(n_parameters)
    if dof < 1:
        raise DataError(f"n_parameters = {n_parameters} leaves no degrees of freedom (n = {n}).")
    e = yhat - y
    sse = float(e @ e)
    bias = float(e.mean())
    sep = float(np.sqrt(np.sum((e - bias) ** 2) / (n - 1)))
    bias_t = abs(bias) * np.sqrt(n) / sep if sep > 0 else np.inf
    # Least-squares line of predicted on reference values (as scipy.stats.linregress).
    sxx = float(np.sum((y - y.mean()) ** 2))
    slope = float(np.sum((y - y.mean()) * (yhat - yhat.mean())) / sxx)
    intercept = float(yhat.mean() - slope * y.mean())
    rss_line = float(np.sum((yhat - intercept - slope * y) ** 2))
    slope_se = np.sqrt(rss_line / (n - 2) / sxx)
    intercept_se = slope_se * np.sqrt(sxx / n + y.mean() ** 2)
    t_crit = t_quantile(1.0 - alpha / 2.0, n - 2)
    # Joint test of the ideal line: restricted RSS is sum e^2 (slope 1, intercept 0).
    line_f = ((sse - rss_line) / 2.0) / (rss_line / (n - 2)) if rss_line > 0 else np.inf
    sd_y = float(np.std(y, ddof=1))
    return RegressionStatistics(
        n=n,
        rmse_kind="RMSEP" if n_parameters is None else "RMSEC",
        rmse=float(np.sqrt(sse / dof)),
        n_parameters=None if n_parameters is None else int(n_parameters),
        bias=bias,
        bias_t=float(bias_t),
        bias_p=float(2.0 * t_sf(bias_t, n - 1)),
        sep=sep,
        r2=float(1.0 - sse / np.sum((y - y.mean()) ** 2)),
        rpd=sd_y / sep if sep > 0 else float("inf"),
        slope=slope,
        slope_ci=(float(slope - t_crit * slope_se), float(slope + t_crit * slope_se)),
        intercept=intercept,
        intercept_ci=(
            float(intercept - t_crit * intercept_se),
            float(intercept + t_crit * intercept_se),
        ),
        line_f=float(line_f),
        line_p=float(f_sf(line_f, 2, n - 2)),
        alpha=alpha,
    )


@dataclass(frozen=True)
class UnivariateCalibration:
    """Single-wavelength Beer's-law line for one analyte.

    Attributes
    ----------
    wavelength : float
        Chosen wavelength (units of the ``wavelengths`` argument, usually nm).
    slope : float
        Absorbance per concentration unit.
    intercept : float
        Absorbance at zero concentration.
    rmsec : float
        RMS error of the back-calculated calibration concentrations, ``n - 2`` df.
    lod : float
        ``3.3 s / slope`` in concentration units.
    lod_origin : str
        ``"blank SD"`` when ``s`` is the blank noise, ``"residual SD"`` when it is the line's
        residual standard deviation.
    """

    wavelength: float
    slope: float
    intercept: float
    rmsec: float
    lod: float
    lod_origin: str


def univariate_calibration(
    wavelengths: object,
    absorbance: object,
    concentrations: object,
    sigma_x: float | None = None,
    pure_spectra: object | None = None,
) -> list[UnivariateCalibration]:
    """Fit the classical one-wavelength calibration line for each analyte (baseline method).

    The wavelength is chosen per analyte as the one maximising ``|slope| * f_k`` where
    ``f_k = |s_k| / sum_j |s_j|`` is the analyte's share of the pure-component absorbance when
    ``pure_spectra`` are given; otherwise the one maximising ``|slope| / s_res`` (the line's
    signal-to-noise). The LOD is ``3.3 s / |slope|`` with ``s = sigma_x`` when given (blank SD),
    else the residual SD of the line (common practice; IUPAC, Olivieri et al. 2006).

    Parameters
    ----------
    wavelengths : array_like, shape (p,)
        Wavelength axis (nm).
    absorbance : array_like, shape (n, p)
        Calibration spectra (AU).
    concentrations : array_like, shape (n,) or (n, m)
        Reference concentrations, one column per analyte.
    sigma_x : float, optional
        Blank noise SD (AU).
    pure_spectra : array_like, shape (m, p), optional
        Pure-component spectra per unit concentration.

    Returns
    -------
    list of UnivariateCalibration
        One per analyte, in column order.

    References
    ----------
    Olivieri, A. C. et al. (2006). Pure Appl. Chem. 78, 633-661.
    """
    wl = as_float_array(wavelengths, "wavelengths", 1)
    a = as_float_array(absorbance, "absorbance", 2)
    c = as_float_array(concentrations, "concentrations", (1, 2))
    c = c[:, None] if c.ndim == 1 else c
    n, p = a.shape
    if wl.size != p or c.shape[0] != n or n < 3:
        raise DataError(
            f"shapes disagree or too few samples: wavelengths {wl.shape}, absorbance {a.shape}, "
            f"concentrations {c.shape}; need p wavelengths, n >= 3 matching rows."
        )
    share = None
    if pure_spectra is not None:
        s = np.abs(as_float_array(pure_spectra, "pure_spectra", 2))
        if s.shape != (c.shape[1], p):
            raise DataError(f"pure_spectra has shape {s.shape}; expected {(c.shape[1], p)}.")
        share = s / np.maximum(s.sum(axis=0), np.finfo(float).tiny)
    a_c = a - a.mean(axis=0)
    col_ss = np.einsum("ij,ij->j", a_c, a_c)
    out = []
    for k in range(c.shape[1]):
        ck = c[:, k] - c[:, k].mean()
        sxx = ck @ ck
        if sxx == 0.0:
            raise DataError(f"concentrations column {k + 1} is constant; cannot fit a line.")
        slopes = ck @ a_c / sxx
        # Residual sum of squares of each line: Syy − b²Sxx (no n × p residual matrix).
        res_sd = np.sqrt(np.maximum(col_ss - slopes**2 * sxx, 0.0) / (n - 2))
        if share is not None:
            score = np.abs(slopes) * share[k]
        else:
            score = np.abs(slopes) / np.maximum(res_sd, np.finfo(float).tiny)
        j = int(np.argmax(score))
        slope = float(slopes[j])
        intercept = float(a[:, j].mean() - slope * c[:, k].mean())
        back = (a[:, j] - intercept) / slope
        s_lod, origin = (sigma_x, "blank SD") if sigma_x is not None else (res_sd[j], "residual SD")
        out.append(
            UnivariateCalibration(
                wavelength=float(wl[j]),
                slope=slope,
                intercept=intercept,
                rmsec=float(np.sqrt(np.sum((back - c[:, k]) ** 2) / (n - 2))),
                lod=float(3.3 * s_lod / abs(slope)),
                lod_origin=origin,
            )
        )
    return out
