"""Numerical kernels shared by :mod:`bandsolve.pls` and :mod:`bandsolve.crossval`.

Both kernels work on cross-products, never on the spectra themselves, and return the PLS
factors for every component count in one pass; each fits many problems at once (the folds of
a cross-validation), one numpy call per step for all of them.

* :func:`kernel_pls_batch` works on p×p matrices ``XᵀX`` and p×m matrices ``XᵀY`` (improved
  kernel algorithm 2 of Dayal & MacGregor 1997), which the cross-validation engine downdates
  fold by fold.  Cost O(p²A) per problem, independent of n.
* :func:`gram_pls_batch` works on one n×n Gram matrix ``XXᵀ`` and on ``Y`` (the wide kernel
  form of Lindgren, Geladi & Wold 1993 and Rännar et al. 1994), each problem being a subset
  of the rows.  Cost O(n²mA) per problem, independent of p.

:func:`kernel_pls` and :func:`gram_pls` fit one problem.  Both take the PLS2 weight as the
exact dominant singular vector of the deflated ``XᵀY`` (from ``numpy.linalg.eigh`` of the
small m×m matrix ``(XᵀY)ᵀ(XᵀY)``), never a power iteration.

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
    ``R = X_cᵀ rotation_coords``, scores ``scores`` (n×A; rows outside the training set hold
    the scores of those spectra centred with the training mean), x loadings
    ``P = X_cᵀ T / tau`` (T: the training rows of the scores); ``y_loadings`` Q (m×A) and
    ``tau`` (A,) as in :class:`KernelFactors`.
    """

    weight_coords: np.ndarray
    rotation_coords: np.ndarray
    scores: np.ndarray
    y_loadings: np.ndarray
    tau: np.ndarray


def _dominant_directions(cross_gram: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unit top eigenvectors v (B, m) and top eigenvalues (B,) of B symmetric m×m ``SᵀS``.

    ``S v`` is then the dominant left singular direction of ``S``; eigenvalue = ``σ_max(S)²``.
    """
    if cross_gram.shape[1] == 1:
        return np.ones((cross_gram.shape[0], 1)), cross_gram[:, 0, 0].copy()
    eigval, eigvec = np.linalg.eigh(cross_gram)
    return eigvec[:, :, -1], eigval[:, -1].copy()


def _first_vector(stacked: np.ndarray, vectors: np.ndarray) -> np.ndarray:
    """``stacked[b] @ vectors[b]`` for every b: (B, r, c) with (B, c) gives (B, r)."""
    return (stacked @ vectors[:, :, None])[:, :, 0]


def _exhausted_direction(sv2: np.ndarray, first_sv2: np.ndarray, live: np.ndarray
                         ) -> np.ndarray:
    """Problems whose next X–Y direction is rounding noise (below RANK_TOL of the first).

    Their ``sv2`` (and that of retired problems) is set to 1 in place as a placeholder, so the
    stacked arithmetic of the step stays finite; they take no more components.
    """
    stop = live & ((sv2 <= RANK_TOL**2 * first_sv2) | (sv2 <= 0.0))
    sv2[~live | stop] = 1.0
    return stop


def _retire(stop: np.ndarray, live: np.ndarray, n_used: np.ndarray, a: int) -> bool:
    """Record ``a`` components for the problems in ``stop`` and drop them from ``live`` (in
    place); False when no problem is left."""
    n_used[stop] = a
    live &= ~stop
    return bool(live.any())


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
    return kernel_pls_batch(cxx[None], cxy[None], n_components)[0]


def kernel_pls_batch(cxx: np.ndarray, cxy: np.ndarray,
                     n_components: int) -> list[KernelFactors]:
    """:func:`kernel_pls` for B problems with the same p at once (the folds of a CV).

    Every step runs on all B problems in one numpy call, so the per-component overhead of
    many small calls is paid once rather than B times (it dominates for p of a few hundred).
    A problem whose rank is exhausted stops contributing (its later components are dropped),
    exactly as a single fit stops.

    Parameters
    ----------
    cxx : ndarray of shape (B, p, p)
        ``X_cᵀX_c`` of each problem.
    cxy : ndarray of shape (B, p, m)
        ``X_cᵀY_c`` of each problem.
    n_components : int
        Largest number of components wanted.

    Returns
    -------
    list of KernelFactors
        One per problem.
    """
    # Deliberately parallel to gram_pls_batch below: the same component loop on the p × p
    # (tall data) instead of the n × n (wide data) cross products; merging them would put a
    # branch in every step of the hot loop.
    n_batch, p, m = cxy.shape
    total_ss = np.trace(cxx, axis1=1, axis2=2)
    s = cxy.copy()
    weights = np.zeros((n_batch, n_components, p))
    rotations = np.zeros((n_batch, n_components, p))
    x_loadings = np.zeros((n_batch, n_components, p))
    y_loadings = np.zeros((n_batch, n_components, m))
    tau = np.zeros((n_batch, n_components))
    n_used = np.full(n_batch, n_components)
    live = np.ones(n_batch, dtype=bool)
    first_sv2 = None
    for a in range(n_components):
        v, sv2 = _dominant_directions(np.swapaxes(s, 1, 2) @ s)
        first_sv2 = sv2.copy() if first_sv2 is None else first_sv2
        stop = _exhausted_direction(sv2, first_sv2, live)
        w = _first_vector(s, v / np.sqrt(sv2)[:, None])  # ‖S v‖ = σ_max: w has unit length
        # Deflating only XᵀY needs the rotation r (with t = X_c r), not w: r = w − R Pᵀw.
        proj = x_loadings[:, :a] @ w[:, :, None]  # (B, a, 1)
        r = w - (np.swapaxes(proj, 1, 2) @ rotations[:, :a])[:, 0]
        cxx_r = _first_vector(cxx, r)
        tau_a = np.einsum("bi,bi->b", r, cxx_r)
        if not _retire(stop | (live & (tau_a <= RANK_TOL * total_ss)), live, n_used, a):
            break
        cxx_r[~live] = 0.0
        tau_a[~live] = 1.0
        q_a = (r[:, None, :] @ s)[:, 0] / tau_a[:, None]
        s -= cxx_r[:, :, None] * q_a[:, None, :]  # XᵀY_def −= τ p qᵀ, with τ p = XᵀX r
        weights[:, a], rotations[:, a] = w, r
        x_loadings[:, a] = cxx_r / tau_a[:, None]
        y_loadings[:, a], tau[:, a] = q_a, tau_a
    return [KernelFactors(weights[b, :k].T, rotations[b, :k].T, x_loadings[b, :k].T,
                          y_loadings[b, :k].T, tau[b, :k]) for b, k in enumerate(n_used)]


def gram_pls(gram: np.ndarray, yc: np.ndarray, n_components: int) -> GramFactors:
    """Wide-data kernel PLS from the centred Gram matrix ``X_cX_cᵀ``.

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
    return gram_pls_batch(gram, yc, np.ones((1, yc.shape[0]), dtype=bool), n_components)[0]


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
    # terms[j] = t_j (2 p_jᵀe + M_jj t_j + 2 Σ_{k>j} M_jk t_k), one row per component.
    terms = x_loadings.T @ resid.T
    terms *= 2.0
    terms += upper @ scores.T
    terms *= scores.T
    q_res = np.empty((n_comp, xs.shape[0]))
    np.einsum("ij,ij->i", resid, resid, out=q_res[-1])
    for a in range(n_comp - 2, -1, -1):  # row a: the components after a+1 dropped
        np.add(q_res[a + 1], terms[a + 1], out=q_res[a])
    return q_res


def gram_pls_batch(gram: np.ndarray, y: np.ndarray, train: np.ndarray,
                   n_components: int) -> list[GramFactors]:
    """:func:`gram_pls` for B training subsets of one data set at once (the folds of a CV).

    Every problem works on n-vectors that are zero outside its training rows, so all B of them
    are multiplied by the one whole-set Gram matrix in a single matrix product per component
    (the Gram matrix is read once, not once per fold, and no training block is copied).
    Centring with each problem's training mean is a rank-one correction of that product: for
    ``u`` zero outside the training rows and summing to zero, ``X_c X_cᵀ u`` is ``G u`` minus
    its mean over the training rows, where ``G`` is the Gram matrix of the data centred with
    any fixed row.  The same correction gives, on the held-out rows, the products with the
    held-out spectra centred with the training mean, so their scores come out of the same
    loop.  Deflation acts on Y only: with orthogonal scores T, deflating ``XXᵀ`` by
    ``I − ttᵀ/τ`` is the same as deflating Y.  A problem whose rank is exhausted stops
    contributing (its later components are dropped).

    Parameters
    ----------
    gram : ndarray of shape (n, n) or (B, n, n)
        ``X₀X₀ᵀ`` of the (optionally scaled) spectra, centred with any fixed row; one per
        problem when each scales the spectra its own way.
    y : ndarray of shape (n, m)
        Concentrations (any offset).
    train : ndarray of bool, shape (B, n)
        Training rows of each problem (at least two each).
    n_components : int
        Largest number of components wanted.

    Returns
    -------
    list of GramFactors
        One per problem; ``scores`` holds every row of the data set, the held-out ones
        included, and the coordinates are zero outside the training rows.
    """
    n_batch, n = train.shape
    m = y.shape[1]
    mask = train.astype(np.float64)
    n_train = mask.sum(axis=1)

    def product(u: np.ndarray) -> np.ndarray:
        """``G u`` of each problem, (B, n, c): one matrix product when G is shared."""
        if gram.ndim == 3:
            return gram @ u
        c = u.shape[2]
        prod = gram @ np.moveaxis(u, 0, 1).reshape(n, n_batch * c)
        return np.moveaxis(prod.reshape(n, n_batch, c), 1, 0)

    def centred_product(u: np.ndarray) -> np.ndarray:
        """``X_c X_cᵀ u`` of each problem on all n rows; u (B, n, c) as described above."""
        prod = product(u)
        prod -= (np.einsum("bi,bic->bc", mask, prod) / n_train[:, None])[:, None, :]
        return prod

    # trace(X_c X_cᵀ) = Σ_train G_ii − 1ᵀG1/n_t over the training rows.
    total_ss = ((mask * np.diagonal(gram, axis1=-2, axis2=-1)).sum(axis=1)
                - np.einsum("bi,bi->b", mask, product(mask[:, :, None])[:, :, 0]) / n_train)
    y_def = (y - (mask @ y / n_train[:, None])[:, None, :]) * mask[:, :, None]
    weight_coords = np.zeros((n_batch, n_components, n))
    rotation_coords = np.zeros((n_batch, n_components, n))
    scores = np.zeros((n_batch, n_components, n))
    scaled_scores = np.zeros((n_batch, n_components, n))  # training rows only, over τ
    y_loadings = np.zeros((n_batch, n_components, m))
    tau = np.zeros((n_batch, n_components))
    n_used = np.full(n_batch, n_components)
    live = np.ones(n_batch, dtype=bool)
    first_sv2 = None
    for a in range(n_components):
        # Recomputed rather than deflated along with Y: once Y_def is down to the noise, a
        # deflated product would carry the rounding error of the first, large components.
        gram_y = centred_product(y_def)
        v, sv2 = _dominant_directions(np.swapaxes(y_def, 1, 2) @ gram_y)
        first_sv2 = sv2.copy() if first_sv2 is None else first_sv2
        stop = _exhausted_direction(sv2, first_sv2, live)
        v /= np.sqrt(sv2)[:, None]
        g = _first_vector(y_def, v)
        gram_g = _first_vector(gram_y, v)
        # Stacked products (matmul) rather than einsum: one BLAS call per problem.
        proj = scaled_scores[:, :a] @ gram_g[:, :, None]  # (B, a, 1)
        t = gram_g - (np.swapaxes(proj, 1, 2) @ scores[:, :a])[:, 0]
        t_train = t * mask
        tau_a = np.einsum("bi,bi->b", t_train, t_train)
        if not _retire(stop | (live & (tau_a <= RANK_TOL * total_ss)), live, n_used, a):
            break
        t_train[~live] = 0.0
        tau_a[~live] = 1.0
        q_a = (t_train[:, None, :] @ y_def)[:, 0] / tau_a[:, None]
        y_def -= t_train[:, :, None] * q_a[:, None, :]
        weight_coords[:, a] = g
        rotation_coords[:, a] = g - (np.swapaxes(proj, 1, 2) @ rotation_coords[:, :a])[:, 0]
        scores[:, a], y_loadings[:, a], tau[:, a] = t, q_a, tau_a
        scaled_scores[:, a] = t_train / tau_a[:, None]
    return [GramFactors(weight_coords[b, :k].T, rotation_coords[b, :k].T, scores[b, :k].T,
                        y_loadings[b, :k].T, tau[b, :k]) for b, k in enumerate(n_used)]
