"""The result of a cross-validation: held-out predictions, error curves and diagnostics."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from bandsolve.errors import ModelError

__all__ = ["CVResult"]


@dataclass
class CVResult:
    """Cross-validated predictions and error curves for one or more model settings.

    Attributes
    ----------
    settings : tuple
        The settings compared: component counts ``(1, ..., A_max)`` for PLS, or the
        estimator's class name for :func:`~bandsolve.crossval.cross_validate_estimator`.
    setting_name : str
        ``"n_components"`` or ``"estimator"``.
    reference : ndarray of shape (n, m)
        Reference concentrations y.
    predictions : ndarray of shape (n_settings, n, m)
        Cross-validated predictions ŷ.  With repeated splitters each sample is held out once
        per repeat and this is the mean over repeats.
    rmsecv : ndarray of shape (n_settings, m)
        Root mean squared error of cross-validation per analyte, ``√(PRESS/n)``; with repeats,
        from the squared errors of every held-out prediction (not of the averaged prediction,
        which would be optimistic).
    rmsecv_total : ndarray of shape (n_settings,)
        ``√(mean over analytes of MSE)``, on the concentration scales as given: analytes with
        large concentration values dominate it, so compare it only when units are alike.
    fold_mse : ndarray of shape (n_settings, n_splits, m)
        Mean squared error of each split.
    fold_index : ndarray of shape (n,)
        Index of the split in which each sample was (first) held out.
    n_held_out : ndarray of shape (n,)
        How many times each sample was held out (the number of repeats).
    q_residuals : ndarray of shape (n_settings, n) or None
        Cross-validated Q: squared X residual of each held-out spectrum after centring (and
        scaling) with its training fold.  None for generic estimators.
    hotelling_t2 : ndarray of shape (n_settings, n) or None
        Hotelling T² of each held-out sample's scores relative to its training fold's scores
        (``Σ_a t_a² / (τ_a/(n_t − 1))``).  None for generic estimators.
    repeat_squared_errors : ndarray of shape (n_settings, n, m) or None
        Mean over repeats of each sample's squared error, kept only when some sample was held
        out more than once (otherwise it is ``errors²``); read it as :attr:`squared_errors`.
    held_out_leverage : ndarray of shape (n_settings, n) or None
        Leverage of each held-out sample on its training fold; read it with :meth:`leverage`.
        None for generic estimators.

    Notes
    -----
    :attr:`errors` and :attr:`squared_errors` are computed when read rather than stored, so a
    result holds one (n_settings, n, m) array instead of three.
    """

    settings: tuple
    setting_name: str
    reference: np.ndarray
    predictions: np.ndarray
    rmsecv: np.ndarray
    rmsecv_total: np.ndarray
    fold_mse: np.ndarray
    fold_index: np.ndarray
    n_held_out: np.ndarray
    q_residuals: np.ndarray | None
    hotelling_t2: np.ndarray | None
    repeat_squared_errors: np.ndarray | None = None
    held_out_leverage: np.ndarray | None = None

    def leverage(self, setting: int) -> np.ndarray:
        """Held-out leverage ``h_i = 1/n_t + T²_i/(n_t − 1)`` of each sample, shape (n,).

        ``setting`` indexes :attr:`settings` (component count − 1 for PLS); ``n_t`` is the size
        of the training set of the split that held the sample out, and a sample held out
        several times (repeats) gets the mean over its splits, as Q and T² do. Raises
        ModelError for generic estimators, which record no T².
        """
        if self.held_out_leverage is None:
            raise ModelError("this cross-validation recorded no Hotelling T², so no leverage.")
        return self.held_out_leverage[setting]

    @property
    def errors(self) -> np.ndarray:
        """``predictions − reference``, shape (n_settings, n, m)."""
        return self.predictions - self.reference

    @property
    def squared_errors(self) -> np.ndarray:
        """Each sample's squared prediction error, shape (n_settings, n, m).

        The mean over repeats when samples were held out several times (not the square of the
        averaged prediction, which would be optimistic).  Used by the selection rules.
        """
        if self.repeat_squared_errors is not None:
            return self.repeat_squared_errors
        errors = self.errors
        return np.square(errors, out=errors)

    def to_frame(self, analytes: list[str] | None = None) -> pd.DataFrame:
        """RMSECV table: one row per setting, one column per analyte plus the total.

        Parameters
        ----------
        analytes : list of str, optional
            Analyte names for the column headers (default ``analyte 1`` …).

        Returns
        -------
        pandas.DataFrame
        """
        m = self.rmsecv.shape[1]
        names = analytes if analytes is not None else [f"analyte {j + 1}" for j in range(m)]
        if len(names) != m:
            raise ModelError(f"{len(names)} analyte names given for {m} analytes; give one "
                             "name per concentration column.")
        frame = pd.DataFrame(self.rmsecv, columns=[f"RMSECV {a}" for a in names],
                             index=pd.Index(self.settings, name=self.setting_name))
        frame["RMSECV total"] = self.rmsecv_total
        return frame
