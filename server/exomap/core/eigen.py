"""Eigenvalues with an estimate of their rounding error, and the stability class they give (DESIGN.md §2).

A fast reaction puts eigenvalues of 1e6..1e32 1/s beside the slow ones (1e-5..1e-3 1/s) that decide whether a
steady state is stable. Judging a real part against a fixed fraction of the largest eigenvalue then calls a
growing oscillation stable; judging it by its bare sign trusts digits the rounding has destroyed. Here each
eigenvalue carries its own error estimate, and the slow eigenvalues of a stiff matrix are computed from the
Schur complement of its fast variables, where they are well conditioned.

References
----------
[1] E. Anderson et al., LAPACK Users' Guide, 3rd ed., SIAM (1999), section 4.8 "Error Bounds for the
    Nonsymmetric Eigenproblem": the error of eigenvalue i is about eps ||A|| / s_i, s_i = |y_i^H x_i| its
    reciprocal condition number (unit left and right eigenvectors).
[2] G. H. Golub, C. F. Van Loan, Matrix Computations, 4th ed., Johns Hopkins (2013), section 7.2 (perturbation
    theory of the unsymmetric eigenproblem) and 7.5.7 (balancing).
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import eig
from scipy.linalg.lapack import get_lapack_funcs

STABLE, SADDLE, UNSTABLE = "stable", "saddle", "unstable"


def _balanced(J: np.ndarray) -> tuple[np.ndarray, int, int]:
    """J balanced by LAPACK ``gebal`` (permutation and diagonal scaling, a similarity [2]) and the range lo..hi
    (inclusive, 0-based) of its rows and columns left after the permutation has isolated eigenvalues: outside
    it the balanced matrix is upper triangular, so its diagonal entries there are eigenvalues exactly (a
    variable whose row or column has no off-diagonal entry, e.g. a product no rate depends on). Called
    directly: scipy's ``matrix_balance`` casts gebal's scale factors to integers with its permutation indices,
    which warns ("invalid value encountered in cast") for a factor above 2^63, as a fast reaction's Jacobian
    needs (entries 1e-30 and 1e30 in one row and column); only the balanced matrix is used here."""
    gebal = get_lapack_funcs("gebal", (J,))
    B, lo, hi, _scale, info = gebal(J, scale=1, permute=1)
    if info != 0:
        return J, 0, J.shape[0] - 1
    return B, int(lo), int(hi)


def _eig_errors(J: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues of the balanced matrix and the first-order bound eps ||B||_F / s_i of each one's error [1];
    the eigenvalues the balancing isolates are diagonal entries, exact (no error)."""
    B, lo, hi = _balanced(J)
    n = B.shape[0]
    iso = np.r_[0:lo, hi + 1 : n]
    core = B[lo : hi + 1, lo : hi + 1]
    w0, e0 = np.diag(B)[iso].astype(complex), np.zeros(iso.size)
    if core.shape[0] == 0:
        return w0, e0
    w, vl, vr = eig(core, left=True, right=True)
    s = np.abs(np.sum(np.conj(vl) * vr, axis=0)) / (np.linalg.norm(vl, axis=0) * np.linalg.norm(vr, axis=0))
    err = np.finfo(float).eps * np.linalg.norm(core) / np.maximum(s, 1e-300)
    return np.concatenate((w0, w)), np.concatenate((e0, err))


#: A diagonal entry this many times the slow rate marks a fast variable (a reactant a fast reaction keeps near
#: zero); the slow eigenvalues are then taken from the Schur complement, not from the whole stiff matrix.
FAST = 1e6


def eigenvalues_with_errors(
    J: np.ndarray, slow_rate: float | None = None, _depth: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues of a real square matrix and an estimate of each one's error [same unit].

    The matrix is balanced (a diagonal similarity, LAPACK ``gebal``); the error of eigenvalue i is the
    first-order bound for a backward-stable eigensolver, eps ||B||_F / s_i, s_i = |y_i^H x_i| / (||x_i|| ||y_i||)
    its reciprocal condition number from the left and right eigenvectors [1].

    A fast reaction makes some diagonal entries (the variables it keeps near zero) many orders of magnitude
    larger than the slow rate ``slow_rate`` (1/tau): the bound on the whole matrix then swamps the slow
    eigenvalues, which decide stability. With ``slow_rate`` given, where some sign is not resolved, the
    variables are split at the widest gap (above ``FAST``) of the sorted diagonal magnitudes: the fast
    eigenvalues are those of J_FF, the slow ones those of the Schur complement
    S(lambda) = J_SS - J_SF (J_FF - lambda I)^-1 J_FS. Both are exact at a fixed point (lambda is an eigenvalue
    of J exactly when it is one of S(lambda), and likewise for the fast block's complement), iterated from the
    blocks' own eigenvalues (each block split again the same way). The error of S's entries (rounding of D and
    of the product, and of the solve by one step of iterative refinement) is added to each slow eigenvalue's
    error through its condition number. A matrix with a non-finite entry gives infinite errors.
    """
    J = np.asarray(J, dtype=float)
    n = J.shape[0]
    if n == 0:
        return np.zeros(0, complex), np.zeros(0)
    if not np.all(np.isfinite(J)):
        return np.full(n, np.nan + 0j), np.full(n, np.inf)
    w, err = _eig_errors(J)
    if slow_rate is None or n < 2 or _depth > 6 or (np.all(np.abs(w.real) > err) and oscillation_known(w, err)):
        return w, err
    d = np.maximum(np.abs(np.diag(J)), slow_rate)
    fast = d > FAST * slow_rate
    if not fast.any() or fast.all():  # no variable fast against the slow rate: split at the widest gap
        order = np.argsort(-d)
        gaps = d[order[:-1]] / d[order[1:]]
        k = int(np.argmax(gaps))
        if gaps[k] <= FAST:
            return w, err
        fast = np.zeros(n, dtype=bool)
        fast[order[: k + 1]] = True
    F, S = np.nonzero(fast)[0], np.nonzero(~fast)[0]
    A, Bm, Cm, D = J[np.ix_(F, F)], J[np.ix_(F, S)], J[np.ix_(S, F)], J[np.ix_(S, S)]
    wf, ef = eigenvalues_with_errors(A, slow_rate, _depth + 1)
    # the fixed-point iterations below contract by about |slow| / |fast|: a factor 10 apart is enough (an
    # iteration that does not settle adds its change to the error)
    if not np.all(np.isfinite(wf)) or np.min(np.abs(wf)) <= 10.0 * float(np.max(d[S])):
        return w, err  # the split block is not all fast: no clean separation
    eps = np.finfo(float).eps
    try:
        X = np.linalg.solve(A, Bm)
        R = Bm - A @ X
        dX = np.abs(np.linalg.solve(A, R)) + np.abs(np.linalg.solve(A, eps * (np.abs(Bm) + np.abs(A) @ np.abs(X))))
    except np.linalg.LinAlgError:
        return w, err
    S0 = D - Cm @ X
    dS = eps * (np.abs(D) + np.abs(Cm) @ np.abs(X)) + np.abs(Cm) @ dX
    ws, es = eigenvalues_with_errors(S0, slow_rate, _depth + 1)
    es = es * (1.0 + np.linalg.norm(dS) / max(eps * np.linalg.norm(S0), 1e-300))

    def eigs(K: np.ndarray) -> np.ndarray:
        return eigenvalues_with_errors(K, slow_rate, _depth + 1)[0]

    # each eigenvalue of J is a fixed point lambda = eig(K(lambda)) of its block's complement taken at lambda
    # (the slow ones: K = J_SS - J_SF (J_FF - lambda)^-1 J_FS; the fast ones: K = J_FF - J_FS (J_SS - lambda)^-1
    # J_SF); a fixed point not reached adds the change to the error
    wf, ef = _settle(wf, ef, A, Bm, Cm, D, eigs)
    ws, es = _settle(ws, es, D, Cm, Bm, A, eigs)
    return np.concatenate((wf, ws)), np.concatenate((ef, es))


def _settle(
    w: np.ndarray, err: np.ndarray, P: np.ndarray, Q: np.ndarray, R: np.ndarray, O: np.ndarray, eigs
) -> tuple[np.ndarray, np.ndarray]:
    """Fixed points lambda = eig(P - Q (O - lambda I)^-1 R) near each of ``w`` (see :func:`eigenvalues_with_errors`)."""
    eps = np.finfo(float).eps
    out, err = w.astype(complex), err.copy()
    eye = np.eye(O.shape[0])
    for i, lam0 in enumerate(w):
        lam = complex(lam0)
        for _ in range(8):
            try:
                K = P - Q @ np.linalg.solve(O - lam * eye, R)
            except np.linalg.LinAlgError:
                err[i] = np.inf
                break
            cand = eigs(K) if np.isrealobj(K) else np.linalg.eigvals(K)
            new = complex(cand[np.argmin(np.abs(cand - lam))])
            done = abs(new - lam) <= max(err[i], 4 * eps * abs(new))
            lam = new
            if done:
                break
        else:
            err[i] += abs(lam - lam0)
        out[i] = lam
    return out, err


def _kind(positive: np.ndarray, real: np.ndarray) -> str:
    if not positive.any():
        return STABLE
    if positive.sum() == 1 and bool(real[positive][0]):
        return SADDLE
    return UNSTABLE


def oscillation_known(eigenvalues: np.ndarray, errors: np.ndarray | None = None) -> bool:
    """Whether the rounding decides the oscillatory flag (the leading eigenvalue is one of a complex pair).

    Next to a coalescence of two eigenvalues (a node turning into a focus, a nearly defective cluster) whether
    the pair is complex is ill-conditioned: an imaginary part within its error of zero may be rounding, and two
    real eigenvalues within their errors of each other may be a pair with a small imaginary part (a real matrix's
    real eigenvalue turns complex only by meeting another real one). The flag is known when every eigenvalue
    that may lead (real part within the errors of the largest) is surely complex, or every one surely real. An
    eigenvalue with no error (set exactly, e.g. a flushing mode) is what it is."""
    ev = np.asarray(eigenvalues, dtype=complex)
    err = np.zeros(ev.shape) if errors is None else np.asarray(errors, dtype=float)
    if ev.size == 0:
        return True
    if not (np.all(np.isfinite(ev)) and np.all(np.isfinite(err))):
        return False
    k = int(np.argmax(ev.real))
    lead = np.nonzero(ev.real + err >= ev.real[k] - err[k])[0]
    exact = (err == 0.0) & (ev.imag == 0.0)
    kinds = set()
    for i in lead:
        if abs(ev[i].imag) > err[i]:
            kinds.add("complex")
        elif ev[i].imag == 0.0 and err[i] == 0.0:
            kinds.add("real")
        elif ev[i].imag != 0.0 and not np.any(
            (np.arange(ev.size) != i) & (np.abs(ev - np.conj(ev[i])) <= err + err[i]) & ~exact
        ):
            # a real matrix's complex eigenvalues come in conjugate pairs: a tiny imaginary part with no partner
            # near its conjugate is rounding of a real eigenvalue (e.g. from the complex fixed-point iteration of
            # the stiff split). An eigenvalue set exactly (a flushing mode) is real and no one's partner: a frozen
            # reaction's mode within rounding of the flushing modes has none (seed 715507)
            kinds.add("real")
        elif ev[i].imag == 0.0:
            others = np.arange(ev.size) != i
            near = others & (ev.imag == 0.0) & (err > 0.0) & (np.abs(ev.real - ev[i].real) <= err + err[i])
            kinds.add("unknown" if near.any() else "real")
        else:
            kinds.add("unknown")
    return kinds in ({"complex"}, {"real"})


def classify(eigenvalues: np.ndarray, errors: np.ndarray | None = None) -> tuple[str, bool, bool]:
    """Stability class, oscillatory flag and whether the class is resolved, from eigenvalues (DESIGN.md §2).

    A real part counts by its sign alone (no threshold tied to the largest eigenvalue: a fast reaction must
    not make a slowly growing oscillation look stable). With ``errors`` (each eigenvalue's rounding error,
    :func:`eigenvalues_with_errors`) a real part within its error of zero has no known sign: the class is
    ``resolved`` only when it comes out the same whichever sign such real parts take. An imaginary part within
    its error of zero counts as real; whether the oscillatory flag is then a fact is :func:`oscillation_known`.
    """
    ev = np.asarray(eigenvalues, dtype=complex)
    err = np.zeros(ev.shape) if errors is None else np.asarray(errors, dtype=float)
    if ev.size == 0:
        return STABLE, False, True
    if not np.all(np.isfinite(ev)):
        return UNSTABLE, False, False
    re = ev.real
    real = np.abs(ev.imag) <= err
    kind = _kind(re > 0, real)
    sure_pos, unsure = re > err, np.abs(re) <= err
    resolved = _kind(sure_pos, real) == _kind(sure_pos | unsure, real) == kind
    k = int(np.argmax(re))
    return kind, bool(abs(ev[k].imag) > err[k]), bool(resolved)


def _leaf_batched(J: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (k, n) of matrices J (k, n, n) and the first-order error bound eps ||J||_F / s_i, with s_i
    from the right eigenvectors V and the left ones, the rows of V^-1 (y_i^H x_i = 1)."""
    eps = np.finfo(float).eps
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        w, V = np.linalg.eig(J)
        try:
            W = np.linalg.inv(V)
        except np.linalg.LinAlgError:
            return w, np.full(w.shape, np.inf)
        s = 1.0 / (np.linalg.norm(V, axis=-2) * np.linalg.norm(W, axis=-1))
        err = eps * np.linalg.norm(J, axis=(-2, -1))[:, None] / s
    return w, np.where(np.isfinite(err), err, np.inf)


def eigenvalues_with_errors_batched(
    J: np.ndarray, slow_rate: np.ndarray, _depth: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (k, n) and error estimates of many small matrices J (k, n, n) at once: the vectorised
    counterpart of :func:`eigenvalues_with_errors` for the map and the branches. Where the sorted diagonal
    magnitudes of a matrix (floored at its ``slow_rate``) have a gap wider than ``FAST``, its variables are split
    there (the points are grouped by their split), and the fast and slow eigenvalues are those of J_FF and of
    the Schur complement S0 = J_SS - J_SF J_FF^-1 J_FS, each split again the same way. Instead of iterating
    S(lambda) to its fixed point, the first-order difference |lambda| ||J_SF J_FF^-1|| ||J_FF^-1 J_FS|| (and
    its counterpart for the fast block) is added to each error, with the rounding of S0's entries, through the
    eigenvalue's condition number. Non-finite matrices give infinite errors."""
    J = np.asarray(J, dtype=float)
    k, n = J.shape[0], J.shape[-1]
    ev = np.full((k, n), np.nan + 0j)
    err = np.full((k, n), np.inf)
    if k == 0 or n == 0:
        return ev, err
    good = np.all(np.isfinite(J), axis=(-2, -1))
    rate = np.broadcast_to(np.asarray(slow_rate, float), (k,))
    with np.errstate(invalid="ignore", over="ignore"):
        d = np.maximum(np.abs(np.diagonal(J, axis1=-2, axis2=-1)), rate[:, None])
    order = np.argsort(-d, axis=-1)
    ds = np.take_along_axis(d, order, axis=-1)
    # fast against the slow rate; where that is none or all of the variables, the widest gap of the sorted
    # diagonal magnitudes if it exceeds FAST
    fast_all = d > FAST * rate[:, None]
    by_rate = fast_all.any(axis=-1) & ~fast_all.all(axis=-1)
    if n > 1 and _depth <= 6:
        gaps = ds[:, :-1] / ds[:, 1:]
        cut = np.argmax(gaps, axis=-1)
        by_gap = ~by_rate & (gaps[np.arange(k), cut] > FAST)
        rank = np.argsort(order, axis=-1)  # position of each variable in the sorted order
        fast_all = np.where(by_rate[:, None], fast_all, rank <= cut[:, None])
        split = good & (by_rate | by_gap)
    else:
        split = np.zeros(k, dtype=bool)
    plain = np.nonzero(good)[0]
    if plain.size:
        ev[plain], err[plain] = _leaf_batched(J[plain])
    # only where the whole matrix leaves a sign unresolved
    split &= ~np.all(np.abs(ev.real) > err, axis=-1)
    idx = np.nonzero(split)[0]
    if idx.size == 0:
        return ev, err
    fast = fast_all[idx]
    patterns, group = np.unique(fast, axis=0, return_inverse=True)
    group = group.reshape(-1)
    eps = np.finfo(float).eps
    for g, pat in enumerate(patterns):
        sel = idx[group == g]
        F, S = np.nonzero(pat)[0], np.nonzero(~pat)[0]
        Jg = J[sel]
        A, Bm, Cm, D = Jg[:, F][:, :, F], Jg[:, F][:, :, S], Jg[:, S][:, :, F], Jg[:, S][:, :, S]
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            try:
                X = np.linalg.solve(A, Bm)  # J_FF^-1 J_FS
                Yt = np.linalg.solve(np.swapaxes(A, -1, -2), np.swapaxes(Cm, -1, -2))  # (J_SF J_FF^-1)^T
            except np.linalg.LinAlgError:
                ev[sel], err[sel] = _leaf_batched(Jg)
                continue
            S0 = D - Cm @ X
            dS = 4.0 * eps * (np.abs(D) + np.abs(Cm) @ np.abs(X))
            wf, ef = eigenvalues_with_errors_batched(A, rate[sel], _depth + 1)
            ws, es = eigenvalues_with_errors_batched(S0, rate[sel], _depth + 1)
            coupling = np.linalg.norm(X, axis=(-2, -1)) * np.linalg.norm(Yt, axis=(-2, -1))
            # relative: an error e of an eigenvalue w came from a perturbation of about e s_i; scale the
            # perturbations of S0 (its rounding, the first-order term) by the same factor e / (eps ||S0||)
            nS = np.maximum(eps * np.linalg.norm(S0, axis=(-2, -1)), 1e-300)
            es = es * (1.0 + np.linalg.norm(dS, axis=(-2, -1)) / nS)[:, None]
            es = es + es / (eps * np.maximum(np.linalg.norm(S0, axis=(-2, -1)), 1e-300))[:, None] * (
                np.abs(ws) * coupling[:, None]
            )
            # each fast eigenvalue is one of its block's complement K(lambda) = J_FF - J_FS (J_SS - lambda)^-1 J_SF
            # at lambda itself: one step of that fixed point from J_FF's eigenvalue (a contraction by about
            # |slow| / |fast|), its change counted twice in the error
            eye = np.eye(S.size)
            for j in range(F.size):
                lam = wf[:, j]
                real = np.isfinite(lam) & (np.abs(lam.imag) <= ef[:, j])
                if not real.any():
                    ef[:, j] = np.where(real, ef[:, j], np.inf)
                    continue
                lr = np.where(real, lam.real, 0.0)
                try:
                    K = A - Bm @ np.linalg.solve(D - lr[:, None, None] * eye, Cm)
                except np.linalg.LinAlgError:
                    ef[:, j] = np.inf
                    continue
                wk, ek = eigenvalues_with_errors_batched(K, rate[sel], _depth + 1)
                near = np.argmin(np.abs(wk - lam[:, None]), axis=-1)
                new = np.take_along_axis(wk, near[:, None], axis=-1)[:, 0]
                enew = np.take_along_axis(ek, near[:, None], axis=-1)[:, 0]
                wf[:, j] = np.where(real, new, lam)
                ef[:, j] = np.where(real, enew + 2.0 * np.abs(new - lam), np.inf)
            # a clean separation (fast eigenvalues 1e3 times the slow ones) or the whole matrix's answer
            sep = np.min(np.abs(wf), axis=-1) > 1e3 * np.max(np.abs(ws), axis=-1)
        keep = sel[sep]
        ev[keep] = np.concatenate((wf, ws), axis=-1)[sep]
        err[keep] = np.concatenate((ef, es), axis=-1)[sep]
    return ev, np.where(np.isfinite(err), err, np.inf)
