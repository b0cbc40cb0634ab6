"""The dual's Hessian A diag(w) A^T over the live legs, and its factorization.

The pattern (pairs of legs that share a product group) is computed once; each
iteration fills the pair values with one sparse product E w_g. Systems are
scaled symmetrically by the diagonal (it spans many decades: legs with slack
have tiny curvature) and factored by dense Cholesky, either whole or, when a
large independent set of legs exists (no product uses two of them), through
the Schur complement of that set's diagonal block, formed and factored in
single precision and refined in double precision (iterative refinement
against the exact scaled matrix; double precision when refinement stalls).

Legs held at their bound by the projected Newton method get an identity row
and column: the system solved is the reduced Hessian of the free legs.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.linalg import blas

#: Attempts with a growing ridge when a factorization fails (the first: the caller's own
#: lam, which may be 0, as the interior-point method needs its system exactly).
_RIDGES = (0.0, 1e-10, 1e-8, 1e-6, 1e-4, 1e-2, 1.0)


class LegSystem:
    """Solves (H_FF + lam I) u = b in the diagonally scaled space of the free legs."""

    def __init__(self, net, linear_solver="auto", mixed=True):
        self.n = net.n
        self.mixed = bool(mixed)
        #: the last factorization's solve (:meth:`solve_again`); buffers are reused, so
        #: it is valid until the next :meth:`solve`
        self._last = None
        self._pattern(net)
        self._setup(linear_solver)

    # -- pattern ---------------------------------------------------------------------------
    def _pattern(self, net):
        n, Mg = self.n, net.Mg
        K = Mg.shape[1]
        rows, cols, egrp = [], [], []
        for p in range(K):                                   # a loop over leg positions
            gp = np.flatnonzero(Mg[:, p])
            lp = Mg[gp, p] - 1
            rows.append(lp); cols.append(lp); egrp.append(gp)
            for q in range(p + 1, K):
                cq = Mg[gp, q] - 1
                ok = (cq >= 0) & (cq != lp)
                r, c = lp[ok], cq[ok]
                rows.append(np.maximum(r, c)); cols.append(np.minimum(r, c)); egrp.append(gp[ok])
        rows = np.concatenate(rows) if rows else np.zeros(0, np.int64)
        cols = np.concatenate(cols) if cols else np.zeros(0, np.int64)
        egrp = np.concatenate(egrp) if egrp else np.zeros(0, np.int64)
        key = rows * n + cols
        if n * n <= 64 * max(len(key), 1) + 2 ** 24:
            mark = np.zeros(n * n, dtype=bool)
            mark[key] = True
            ukey = np.flatnonzero(mark)
            e_pair = np.cumsum(mark, dtype=np.int64)[key] - 1
        else:
            ukey, e_pair = np.unique(key, return_inverse=True)
        #: pair <- group incidence: the pair values are E @ w_g
        self.E = sp.csr_matrix((np.ones(len(egrp)), (e_pair, egrp)), shape=(len(ukey), net.G))
        self.p_row = ukey // n
        self.p_col = ukey % n
        isdiag = self.p_row == self.p_col
        self.diag_pair = np.full(n, -1, dtype=np.int64)
        self.diag_pair[self.p_row[isdiag]] = np.nonzero(isdiag)[0]
        self.off = np.nonzero(~isdiag)[0]

    def _setup(self, choice):
        n = self.n
        r, c = self.p_row[self.off], self.p_col[self.off]
        indep = np.zeros(n, dtype=bool)
        if choice in ("auto", "schur") and n > 1:
            adj = sp.csr_matrix((np.ones(len(r)), (r, c)), shape=(n, n))
            adj = (adj + adj.T).tocsr()
            deg = np.diff(adj.indptr)
            blocked = np.zeros(n, dtype=bool)
            for i in np.argsort(deg, kind="stable"):         # greedy independent set (a loop over legs)
                if not blocked[i]:
                    indep[i] = True
                    blocked[adj.indices[adj.indptr[i]:adj.indptr[i + 1]]] = True
        use = choice == "schur" or (choice == "auto" and indep.sum() >= 0.25 * n and n >= 200)
        self.schur = bool(use and indep.any())
        if not self.schur:
            self.flat = self.p_row + n * self.p_col          # Fortran order, lower triangle
            self.Hbuf = np.zeros((n, n), order="F")
            return
        self.I, self.R = np.nonzero(indep)[0], np.nonzero(~indep)[0]
        nI, nR = len(self.I), len(self.R)
        loc = np.empty(n, dtype=np.int64)
        loc[self.I] = np.arange(nI)
        loc[self.R] = np.arange(nR)
        pr, pc = self.p_row, self.p_col
        rr = ~indep[pr] & ~indep[pc]
        ir = indep[pr] ^ indep[pc]
        self.s_rr = np.nonzero(rr)[0]
        a, b = loc[pr[rr]], loc[pc[rr]]
        self.s_rr_flat = np.maximum(a, b) + nR * np.minimum(a, b)
        self.s_ir = np.nonzero(ir)[0]
        iI = np.where(indep[pr[ir]], loc[pr[ir]], loc[pc[ir]])
        iR = np.where(indep[pr[ir]], loc[pc[ir]], loc[pr[ir]])
        self.s_ir_flat = iI + nI * iR
        self.MT = np.zeros((nI, nR), order="F")
        self.S = np.zeros((nR, nR), order="F")
        self.MT32 = np.zeros((nI, nR), dtype=np.float32, order="F")
        self.S32 = np.zeros((nR, nR), dtype=np.float32, order="F")
        self._hs = None

    # -- values ----------------------------------------------------------------------------
    def pair_values(self, w_g):
        """The Hessian's lower-triangle pair values A diag(w) A^T."""
        return self.E @ w_g

    def diagonal(self, hv):
        return hv[self.diag_pair]

    def solve(self, hv, scale, held, lam, b):
        """u with (S H S + lam I) u = b on the free legs (``held`` legs: identity rows),
        S = diag(scale). ``hv``: the pair values."""
        sv = hv * scale[self.p_row]
        sv *= scale[self.p_col]
        # couplings far below the unit diagonal change nothing; their subnormal
        # products would slow the factorization a hundredfold
        sv[np.abs(sv) < (1e-15 if self.mixed else 1e-30)] = 0.0
        if np.any(held):
            sv[held[self.p_row] | held[self.p_col]] = 0.0
        self._last = None
        for ridge in _RIDGES:
            sv[self.diag_pair] = 1.0 + max(lam, ridge)
            try:
                return self._solve(sv, b)
            except (np.linalg.LinAlgError, sla.LinAlgError, FloatingPointError):
                continue
        return b / (1.0 + lam)                                # scaled steepest descent

    def solve_again(self, B):
        """U with the matrix of the last :meth:`solve` times U = B (columns of B), reusing its
        factorization; None when that solve fell back to steepest descent or refinement
        fails now."""
        if self._last is None:
            return None
        try:
            return self._last(B)
        except (np.linalg.LinAlgError, sla.LinAlgError, FloatingPointError):
            return None

    def _solve(self, sv, b):
        if not self.schur:
            H = self.Hbuf
            H.fill(0.0)
            H.ravel(order="F")[self.flat] = sv
            c = sla.cho_factor(H, lower=True, overwrite_a=True, check_finite=False)
            return self._keep(lambda r: sla.cho_solve(c, r, check_finite=False), b)
        if self.mixed:
            try:
                c = self._schur_factor(sv, self.MT32, self.S32, blas.ssyrk)
                Hs = self._scaled_matrix(sv)
                return self._keep(lambda r: self._refined(c, self.MT32, Hs, r), b)
            except (np.linalg.LinAlgError, sla.LinAlgError, FloatingPointError):
                pass
        c = self._schur_factor(sv, self.MT, self.S, blas.dsyrk)
        return self._keep(lambda r: self._schur_apply(c, self.MT, r), b)

    def _keep(self, apply, b):
        u = apply(b)
        self._last = apply
        return u

    def _schur_factor(self, sv, MT, S, syrk):
        S.fill(0.0)
        MT.ravel(order="F")[self.s_ir_flat] = sv[self.s_ir]
        S.ravel(order="F")[self.s_rr_flat] = sv[self.s_rr]
        # the independent set's block is diagonal and uniform (1 + lam after scaling)
        self._dI = float(sv[self.diag_pair[self.I[0]]])
        S = syrk(-1.0 / self._dI, MT, beta=1.0, c=S, trans=1, lower=1, overwrite_c=1)
        return sla.cho_factor(S, lower=True, overwrite_a=True, check_finite=False)

    def _schur_apply(self, c, MT, b):
        dt = MT.dtype
        bI, bR = b[self.I].astype(dt), b[self.R].astype(dt)
        d = self._dI
        uR = sla.cho_solve(c, bR - (MT.T @ bI) / d, check_finite=False)
        u = np.empty(b.shape)
        u[self.R] = uR
        u[self.I] = (bI - MT @ uR) / d
        return u

    def _scaled_matrix(self, sv):
        if self._hs is None:
            off = self.off
            rows = np.concatenate([self.p_row, self.p_col[off]])
            cols = np.concatenate([self.p_col, self.p_row[off]])
            src = np.concatenate([np.arange(len(self.p_row)), off])
            order = np.lexsort((cols, rows))
            indptr = np.zeros(self.n + 1, dtype=np.int32)
            np.cumsum(np.bincount(rows, minlength=self.n), out=indptr[1:])
            self._hs = (src[order], cols[order].astype(np.int32), indptr)
        perm, indices, indptr = self._hs
        return sp.csr_matrix((sv[perm], indices, indptr), shape=(self.n, self.n))

    def _refined(self, c, MT, Hs, b):
        u = self._schur_apply(c, MT, b)
        bn = float(np.abs(b).max(initial=0.0)) or 1.0
        prev = np.inf
        for _ in range(8):
            res = b - Hs @ u
            rn = float(np.abs(res).max(initial=0.0))
            if not np.isfinite(rn) or rn > 0.5 * prev:
                raise FloatingPointError("refinement stalled")
            if rn <= 1e-11 * bn:
                return u
            u += self._schur_apply(c, MT, res)
            prev = rn
        raise FloatingPointError("refinement did not converge")
