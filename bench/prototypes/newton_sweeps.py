#!/usr/bin/env python3
"""Prototype (numpy/SciPy, not part of the product): Newton-GMRES on the
fixed point of the plain barycenter sweep, with a preconditioner from the
linearised problem. It measures how many sweeps (kernel work) the last
stage needs from the solution at twice the target epsilon, the quantity
behind the engine issue's "at most 100 full-grid iterations".

Method (see DEVELOPERS.md, round of 2026-12-02 late night, item (d)):
  * the sweep Phi: f_k = eps (log a_k - LK g_k / eps), log b = sum_k w_k
    LK f_k / eps, g_k = eps log b - eps LK f_k / eps (dense log-sum-exp on
    the grid, separable, pixel size 1);
  * Newton on g = Phi(g): (I - Phi') d = Phi(g) - g by right-preconditioned
    GMRES(m), Jacobian products by differences (one sweep each);
  * preconditioner: for smooth errors I - Phi' acts as (I - W) T with
    T_k = -(1 / 2b) div(b S_k grad), S_k the two-step covariance of plan k
    on the barycenter's side (from its conditional moments), W the weighted
    mean over inputs; the coupled system L_k d_k - b s = b r_k,
    sum_k w_k d_k = 0 (L_k the 5-point form of div(b S_k grad) / 2, b
    floored at 1e-3 of its peak) is solved exactly, and r is added back for
    the rough errors. Without the preconditioner (--plain) it is plain
    Newton-GMRES.

Usage: newton_sweeps.py DIR [--eps 1] [--inner 10] [--plain] [--rebuild N] [--smooth]
       [--decoupled [--cgtol T]] [--sor OMEGA]
DIR holds field_*.npy (../shared/bench/make_fields.py --k 8 --size 32|64).
Slow above 64 x 64 (dense log-sum-exp).
"""
import argparse, glob, sys
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spl

ap = argparse.ArgumentParser()
ap.add_argument("dir"); ap.add_argument("--eps", type=float, default=1.0)
ap.add_argument("--inner", type=int, default=10); ap.add_argument("--plain", action="store_true")
ap.add_argument("--rebuild", type=int, default=1, help="rebuild the preconditioner every N Newton steps")
ap.add_argument("--tol", type=float, default=1e-6)
ap.add_argument("--smooth", action="store_true", help="a plain sweep after each Newton step")
ap.add_argument("--safeguard", action="store_true", help="backtrack on the residual, fall back to plain sweeps")
ap.add_argument("--decoupled", action="store_true", help="per-input Laplacians on b (r_k - rbar), then the projection onto sum_k w_k d_k = 0")
ap.add_argument("--cgtol", type=float, default=0, help="with --decoupled: inner CG solves to this relative tolerance instead of exact ones")
ap.add_argument("--sor", type=float, default=0, help="instead of Newton: sweeps over-relaxed by this fixed factor (f and g), the baseline")
args = ap.parse_args()
A = np.stack([np.load(f) for f in sorted(glob.glob(args.dir + "/field_*.npy"))]).astype(float)
A /= A.sum(axis=(1, 2))[:, None, None]
K, H, W = A.shape
assert H == W, "square fields only"
N, n, EPS = H, H * W, args.eps
w = np.full(K, 1.0 / K)
LA = np.log(A)
C = (np.arange(N)[:, None] - np.arange(N)[None, :]).astype(float) ** 2


def lse_axis(x, eps, axis):
    x = np.moveaxis(x, axis, -1)
    t = x[..., None, :] - C[None, :, :] / eps
    m = t.max(axis=-1, keepdims=True)
    return np.moveaxis((m + np.log(np.exp(t - m).sum(axis=-1, keepdims=True)))[..., 0], -1, axis)


def LK(x, eps):  # log K exp(x) for a stack (., H, W)
    return lse_axis(lse_axis(x, eps, 2), eps, 1)


sweeps = 0


def Phi(g, eps):
    global sweeps
    sweeps += 1
    f = eps * (LA - LK(g / eps, eps))
    lku = LK(f / eps, eps)
    return eps * (np.tensordot(w, lku, 1)[None] - lku), f


def resid(f, g, eps):  # the driver's rule: largest first-marginal L1 violation
    return np.abs(np.exp(f / eps + LK(g / eps, eps)) - A).sum(axis=(1, 2)).max()


def gmres(Av, rhs, P, m):  # right-preconditioned GMRES(m) from 0
    beta = np.linalg.norm(rhs)
    V, Z, Hm = [rhs / beta], [], np.zeros((m + 1, m))
    for j in range(m):
        z = P(V[j]); Z.append(z); v = Av(z)
        for i in range(j + 1):
            Hm[i, j] = v @ V[i]; v = v - Hm[i, j] * V[i]
        Hm[j + 1, j] = np.linalg.norm(v)
        if Hm[j + 1, j] < 1e-14 * beta:
            m = j + 1; break
        V.append(v / Hm[j + 1, j])
    e1 = np.zeros(m + 1); e1[0] = beta
    y = np.linalg.lstsq(Hm[:m + 1, :m], e1, rcond=None)[0]
    return sum(y[i] * Z[i] for i in range(m))


yy, xx = np.meshgrid(np.arange(H, dtype=float) + 1, np.arange(W, dtype=float) + 1, indexing="ij")


def lap(bb, Syy, Sxx):  # 5-point div(bb S grad) / 2, Neumann, as a positive matrix
    idx = np.arange(n).reshape(H, W)
    rows, cols, vals, diag = [], [], [], np.zeros(n)
    for s1, s2, S in [((slice(None), slice(0, W - 1)), (slice(None), slice(1, W)), Sxx),
                      ((slice(0, H - 1), slice(None)), (slice(1, H), slice(None)), Syy)]:
        p, q = idx[s1].ravel(), idx[s2].ravel()
        c = 0.25 * (bb[s1] * S[s1] + bb[s2] * S[s2]).ravel()
        rows += [p, q]; cols += [q, p]; vals += [-c, -c]
        np.add.at(diag, p, c); np.add.at(diag, q, c)
    L = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    return (L + sp.diags(diag + 1e-12 * diag.max())).tocsc()


def precond(g, eps):
    f = eps * (LA - LK(g / eps, eps))
    b = np.exp(np.tensordot(w, LK(f / eps, eps), 1))
    ey = lambda k, t: np.exp(LK((g[k] + eps * np.log(t))[None] / eps, eps)[0] - LK(g[k][None] / eps, eps)[0])  # E[t(y) | x]
    ex = lambda k, t: np.exp(LK((f[k] + eps * np.log(t))[None] / eps, eps)[0] - LK(f[k][None] / eps, eps)[0])  # E[t(x) | y]
    bf = np.maximum(b, 1e-3 * b.max())
    blocks = [[None] * (K + 1) for _ in range(K + 1)]
    for k in range(K):
        S = []
        for c in (yy, xx):  # two-step variance per axis: E[Var(y'|x) + (E[y'|x] - y)^2 | y]
            R = ey(k, c)
            V = np.maximum(ey(k, c ** 2) - R ** 2, 1e-300)
            S.append(ex(k, V) + ex(k, R ** 2) - 2 * c * ex(k, R) + c ** 2)
        blocks[k][k] = lap(bf, *S) + 1e-9 * sp.identity(n)
        blocks[k][K] = -sp.diags(bf.ravel())
        blocks[K][k] = w[k] * sp.identity(n)
    if args.decoupled:
        Ls = [blocks[k][k] for k in range(K)]
        sols = [spl.factorized(L) for L in Ls]

        def cg(L, rhs):
            try:
                return spl.cg(L, rhs, rtol=args.cgtol, atol=0, maxiter=5000)[0]
            except TypeError:  # SciPy before 1.12
                return spl.cg(L, rhs, tol=args.cgtol, atol=0, maxiter=5000)[0]

        def Pd(r):
            r = r.reshape(K, H, W)
            rb = np.tensordot(w, r, 1)
            d = []
            for k in range(K):
                rhs = (bf * (r[k] - rb)).ravel()
                rhs -= rhs.mean()  # Neumann: constants are the gauge
                x = cg(Ls[k], rhs) if args.cgtol else sols[k](rhs)
                d.append(x - x.mean())
            d = np.array(d)
            d -= np.tensordot(w, d, 1)[None]
            return d.ravel() + r.ravel()
        return Pd
    blocks[K][K] = 1e-12 * sp.identity(n)
    solve = spl.factorized(sp.bmat(blocks, format="csc"))

    def P(r):
        r = r.reshape(K, H, W)
        rhs = np.concatenate([(bf * r[k]).ravel() for k in range(K)] + [np.zeros(n)])
        return solve(rhs)[:K * n] + r.ravel()
    return P


# Start: the solution at twice the target epsilon (plain Newton-GMRES, tight).
g = np.zeros((K, H, W))
for _ in range(100):
    gn, f = Phi(g, 2 * EPS)
    if resid(f, gn, 2 * EPS) < 1e-9:
        break
    Av = lambda v: v - (Phi(g + 1e-5 / np.abs(v).max() * v.reshape(g.shape), 2 * EPS)[0] - gn).ravel() * np.abs(v).max() / 1e-5
    g = g + gmres(Av, (gn - g).ravel(), lambda x: x, 20).reshape(g.shape)
g = gn
sweeps = 0
g, _ = Phi(g, EPS)  # one plain sweep at the target first: a smoother for the start
if args.sor:
    f = None
    for it in range(20000):
        fn = EPS * (LA - LK(g / EPS, EPS))
        f = fn if f is None else (1 - args.sor) * f + args.sor * fn
        lku = LK(f / EPS, EPS)
        g = (1 - args.sor) * g + args.sor * EPS * (np.tensordot(w, lku, 1)[None] - lku)
        sweeps += 1
        r = resid(f, g, EPS)
        if r <= args.tol:
            break
    print(f"{H}x{W}, eps {EPS}: {sweeps} sweeps to residual {r:.3g} (over-relaxed, factor {args.sor})")
    sys.exit(0)
P = None
gn, f = Phi(g, EPS)
r = resid(f, gn, EPS)
for step in range(200):
    print(f"Newton step {step}: {sweeps} sweeps, residual {r:.3g}", flush=True)
    if r <= args.tol:
        break
    if args.plain:
        P = lambda x: x
    elif P is None or step % args.rebuild == 0:
        P = precond(g, EPS)
    Av = lambda v: v - (Phi(g + 1e-5 / np.abs(v).max() * v.reshape(g.shape), EPS)[0] - gn).ravel() * np.abs(v).max() / 1e-5
    d = gmres(Av, (gn - g).ravel(), P, args.inner).reshape(g.shape)
    if not args.safeguard:
        g = g + d
        if args.smooth:
            g, _ = Phi(g, EPS)
        gn, f = Phi(g, EPS)
        r = resid(f, gn, EPS)
        continue
    # Safeguard: accept the step, or a half or a quarter of it, only where
    # the residual falls; else take 10 plain sweeps from where we were.
    for t in (1, 0.5, 0.25):
        gt = g + t * d
        gnt, ft = Phi(gt, EPS)
        rt = resid(ft, gnt, EPS)
        if rt < r:
            g, gn, f, r = gt, gnt, ft, rt
            break
    else:
        for _ in range(10):
            g = gn
            gn, f = Phi(g, EPS)
        r = resid(f, gn, EPS)
print(f"{H}x{W}, eps {EPS}: {sweeps} sweeps to residual {r:.3g}", "(plain Newton-GMRES)" if args.plain else "(preconditioned)")
