"""Numerical kernels shared by :mod:`bandsolve.pls` and :mod:`bandsolve.crossval`.

Both kernels take *centred* (and, if wanted, scaled) cross-products and return the PLS factors
for every component count in one pass.  Neither touches the data matrix itself, which is what
lets the cross-validation engine downdate the cross-products fold by fold instead of refitting.

* :func:`kernel_pls` works on the p×p matrix ``XᵀX`` and p×m matrix ``XᵀY`` (improved kernel
  algorithm 2 of Dayal & MacGregor 1997).  Cost O(p²A), independent of n.
* :func:`gram_pls` works on the n×n Gram matrix ``XXᵀ`` and on ``Y`` (the wide kernel form of
  Lindgren, Geladi & Wold 1993 and Rännar et al. 1994).  Cost O(n²mA), independent of p.

Both take the PLS2 weight as the exact dominant singular vector of the deflated ``XᵀY``
(from ``numpy.linalg.eigh`` of the small m×m matrix ``(XᵀY)ᵀ(XᵀY)``), never a power iteration.

References
----------
.. [1] Dayal, B. S., & MacGregor, J. F. (1997). Improved PLS algorithms. *Journal of
   Chemometrics*, 11(1), 73-85.
.. [2] Lindgren, F., Geladi, P., & Wold, S. (1993). The kernel algorithm for PLS. *Journal of
   Chemometrics*, 7(1), 45-59.
.. [3] Rännar, S., Lindgren, F., Geladi, P., & Wold, S. (1994). A PLS kernel algorithm for data
   sets with many variables and fewer objects. Part 1: Theory and algorithm. *Journal of
   Chemometrics*, 8(2), 111-125.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: A component is not extracted when its score sum of squares falls below this fraction of the
#: total X sum of squares, or when the remaining X-Y covariance falls below this fraction of the
#: initial one: X (or Y) has no rank left and further directions would be rounding noise.
RANK_TOL = 1e-12


@dataclass
class KernelFactors:
    """PLS factors in the feature space (p-dimensional), columns ordered by component.

    ``weights`` W, ``rotations`` R (scores ``T = X_c R``), ``x_loadings`` P (p×A),
    ``y_loadings`` Q (m×A) and ``tau`` (A,) = ``‖t_a‖²``.  A may be smaller than requested.
    """

    weights: np.ndarray
    rotations: np.ndarray
    x_loadings: np.ndarray
    y_loadings: np.ndarray
    tau: np.ndarray


@dataclass
class GramFactors:
    """PLS factors in the sample space (n-dimensional) of a Gram-matrix fit.

    With ``X_c`` the centred training data: weights ``W = X_cᵀ weight_coords``, rotations
    ``R = X_cᵀ rotation_coords``, training scores ``scores`` T (n×A), x loadings
    ``P = X_cᵀ T / tau``; ``y_loadings`` Q (m×A) and ``tau`` (A,) as in :class:`KernelFactors`.
    """

    weight_coords: np.ndarray
    rotation_coords: np.ndarray
    scores: np.ndarray
    y_loadings: np.ndarray
    tau: np.ndarray


def _dominant_direction(cross_gram: np.ndarray) -> tuple[np.ndarray, float]:
    """Unit top eigenvector v and top eigenvalue of the symmetric m×m matrix ``SᵀS``.

    ``S v`` is then the dominant left singular direction of ``S``; eigenvalue = ``σ_max(S)²``.
    """
    if cross_gram.shape[0] == 1:
        return np.ones(1), float(cross_gram[0, 0])
    eigval, eigvec = np.linalg.eigh(cross_gram)
    return eigvec[:, -1], float(eigval[-1])


def kernel_pls(cxx: np.ndarray, cxy: np.ndarray, n_components: int) -> KernelFactors:
    """Improved kernel PLS (algorithm 2) from centred cross-products.

    Parameters
    ----------
    cxx : ndarray of shape (p, p)
        ``X_cᵀX_c`` of the centred (optionally scaled) training spectra.
    cxy : ndarray of shape (p, m)
        ``X_cᵀY_c``.
    n_components : int
        Largest number of components wanted.

    Returns
    -------
    KernelFactors
        Factors for the components that could be extracted (see :data:`RANK_TOL`).

    References
    ----------
    .. [1] Dayal, B. S., & MacGregor, J. F. (1997). Improved PLS algorithms. *Journal of
       Chemometrics*, 11(1), 73-85.
    """
    # Deliberately parallel to gram_pls_batch below: the same component loop on the p × p
    # (tall data) instead of the n × n (wide data) cross products; merging them would put a
    # branch in every step of the hot loop.
    p, m = cxy.shape
    total_ss = float(np.trace(cxx))
    s = cxy.copy()
    weights = np.zeros((p, n_components))
    rotations = np.zeros((p, n_components))
    x_loadings = np.zeros((p, n_components))
    y_loadings = np.zeros((m, n_components))
    tau = np.zeros(n_components)
    first_sv2 = None
    a = 0
    for a in range(n_components):
        v, sv2 = _dominant_direction(s.T @ s)
        first_sv2 = sv2 if first_sv2 is None else first_sv2
        if sv2 <= RANK_TOL**2 * first_sv2 or sv2 <= 0.0:
            break
        w = s @ v
        w /= np.linalg.norm(w)
        # Deflating only XᵀY needs the rotation r (with t = X_c r), not w: r = w − R Pᵀw.
        r = w - rotations[:, :a] @ (x_loadings[:, :a].T @ w)
        cxx_r = cxx @ r
        tau_a = float(r @ cxx_r)
        if tau_a <= RANK_TOL * total_ss:
            break
        p_a = cxx_r / tau_a
        q_a = (s.T @ r) / tau_a
        s -= tau_a * np.outer(p_a, q_a)
        weights[:, a], rotations[:, a], x_loadings[:, a] = w, r, p_a
        y_loadings[:, a], tau[a] = q_a, tau_a
    else:
        a = n_components
    return KernelFactors(weights[:, :a], rotations[:, :a], x_loadings[:, :a],
                         y_loadings[:, :a], tau[:a])


def gram_pls(gram: np.ndarray, yc: np.ndarray, n_components: int) -> GramFactors:
    """Wide-data kernel PLS from the centred Gram matrix ``X_cX_cᵀ``.

    Deflation acts on Y only: with orthogonal scores T, deflating ``XXᵀ`` by ``I − ttᵀ/τ`` is
    the same as deflating Y, because ``(XᵀY_def)ᵀ(XᵀY_def) = Y_defᵀ(XXᵀ)Y_def``.

    Parameters
    ----------
    gram : ndarray of shape (n, n)
        ``X_cX_cᵀ`` of the centred (optionally scaled) training spectra.
    yc : ndarray of shape (n, m)
        Centred training concentrations.
    n_components : int
        Largest number of components wanted.

    Returns
    -------
    GramFactors
        Factors for the components that could be extracted (see :data:`RANK_TOL`).

    References
    ----------
    .. [1] Lindgren, F., Geladi, P., & Wold, S. (1993). The kernel algorithm for PLS. *Journal
       of Chemometrics*, 7(1), 45-59.
    .. [2] Rännar, S., Lindgren, F., Geladi, P., & Wold, S. (1994). A PLS kernel algorithm for
       data sets with many variables and fewer objects. Part 1. *Journal of Chemometrics*, 8(2),
       111-125.
    """
    return gram_pls_batch(gram[None], yc[None], n_components)[0]


def residual_ss_path(xs: np.ndarray, scores: np.ndarray, x_loadings: np.ndarray) -> np.ndarray:
    """Sum of squared X residuals of each row after 1..A components.

    Parameters
    ----------
    xs : ndarray of shape (n, p)
        Centred (optionally scaled) spectra.
    scores : ndarray of shape (n, A)
        Their scores ``xs @ R``.
    x_loadings : ndarray of shape (p, A)
        X loadings P.

    Returns
    -------
    ndarray of shape (A, n)
        Row ``a-1`` is ``‖x − Σ_{j≤a} p_j t_j‖²`` (the Q statistic with a components).

    Notes
    -----
    The residual after all A components, ``e = x − P t``, is formed explicitly once per row
    (p-length).  With a components the residual is ``e + P s``, where ``s`` keeps the scores of
    components a+1..A, so with ``M = PᵀP``
    ``‖x − Σ_{j≤a} p_j t_j‖² = ‖e‖² + Σ_{j>a} t_j (2 p_jᵀe + M_jj t_j + 2 Σ_{k>j} M_jk t_k)``,
    a sum over the dropped components of A-dimensional terms.  Every term is of the size of the
    residuals themselves, so no digits are lost to the cancellation of the quadratic-form
    shortcut ``‖x‖² − 2tᵀPᵀx + tᵀPᵀPt``.
    """
    n_comp = scores.shape[1]
    if n_comp == 0:
        return np.empty((0, xs.shape[0]))
    resid = xs - scores @ x_loadings.T
    gram = x_loadings.T @ x_loadings
    upper = np.triu(gram) + np.triu(gram, 1)
    terms = scores * (2.0 * (resid @ x_loadings) + scores @ upper.T)
    dropped = np.cumsum(terms[:, :0:-1], axis=1)[:, ::-1]  # column a-1: Σ over j > a
    q_res = np.empty((n_comp, xs.shape[0]))
    q_res[-1] = np.einsum("ij,ij->i", resid, resid)
    q_res[:-1] = q_res[-1] + dropped.T
    return q_res


def gram_pls_batch(grams: np.ndarray, ycs: np.ndarray, n_components: int) -> list[GramFactors]:
    """:func:`gram_pls` for B problems of the same size at once (the folds of a CV).

    Every step runs on all B problems in one numpy call, so the per-component overhead of
    many small calls is paid once rather than B times (it dominates for small folds).  A
    problem whose rank is exhausted stops contributing (its later components are dropped),
    exactly as :func:`gram_pls` stops.

    Parameters
    ----------
    grams : ndarray of shape (B, n, n)
        Centred Gram matrices.
    ycs : ndarray of shape (B, n, m)
        Centred concentrations.
    n_components : int
        Largest number of components wanted.

    Returns
    -------
    list of GramFactors
        One per problem, as :func:`gram_pls` would return it.
    """
    n_batch, n, m = ycs.shape
    total_ss = np.trace(grams, axis1=1, axis2=2)
    y_def = ycs.copy()
    weight_coords = np.zeros((n_batch, n_components, n))
    rotation_coords = np.zeros((n_batch, n_components, n))
    scores = np.zeros((n_batch, n_components, n))
    scaled_scores = np.zeros((n_batch, n_components, n))
    y_loadings = np.zeros((n_batch, n_components, m))
    tau = np.zeros((n_batch, n_components))
    n_used = np.full(n_batch, n_components)
    live = np.ones(n_batch, dtype=bool)
    first_sv2 = None
    for a in range(n_components):
        gram_y = grams @ y_def
        cross = np.swapaxes(y_def, 1, 2) @ gram_y
        if m == 1:
            v, sv2 = np.ones((n_batch, 1)), cross[:, 0, 0].copy()
        else:
            eigval, eigvec = np.linalg.eigh(cross)
            v, sv2 = eigvec[:, :, -1], eigval[:, -1].copy()
        first_sv2 = sv2.copy() if first_sv2 is None else first_sv2
        stop = live & ((sv2 <= RANK_TOL**2 * first_sv2) | (sv2 <= 0.0))
        sv2[~live | stop] = 1.0  # placeholders: these problems take no more components
        v /= np.sqrt(sv2)[:, None]
        g = (y_def @ v[:, :, None])[:, :, 0]
        gram_g = (gram_y @ v[:, :, None])[:, :, 0]
        # Stacked products (matmul) rather than einsum: one BLAS call per problem.
        proj = scaled_scores[:, :a] @ gram_g[:, :, None]  # (B, a, 1)
        t = gram_g - (np.swapaxes(proj, 1, 2) @ scores[:, :a])[:, 0]
        tau_a = (t[:, None, :] @ t[:, :, None])[:, 0, 0]
        stop |= live & (tau_a <= RANK_TOL * total_ss)
        n_used[stop] = a
        live &= ~stop
        if not live.any():
            break
        t[~live] = 0.0
        tau_a[~live] = 1.0
        q_a = (t[:, None, :] @ y_def)[:, 0] / tau_a[:, None]
        y_def -= t[:, :, None] * q_a[:, None, :]
        weight_coords[:, a] = g
        rotation_coords[:, a] = g - (np.swapaxes(proj, 1, 2) @ rotation_coords[:, :a])[:, 0]
        scores[:, a], y_loadings[:, a], tau[:, a] = t, q_a, tau_a
        scaled_scores[:, a] = t / tau_a[:, None]
    return [GramFactors(weight_coords[b, :k].T, rotation_coords[b, :k].T, scores[b, :k].T,
                        y_loadings[b, :k].T, tau[b, :k]) for b, k in enumerate(n_used)]
