"""Variants of the grid-route forward kernel, measured against the one kept
(``bench_irregular_probes.py --options``); not used by cavchar itself.

Each variant computes the same log-likelihood as
:func:`cavchar.models.probes.hmm_kernels.forward_loglik` on the grid route (checked by
the benchmark) with N written out as in :mod:`cavchar.models.probes._unrolled`:

* ``lanes``: L parameter sets per loop body (the per-probe loads of the code,
  the table index and the remainder shared; L independent chains for the
  processor to interleave);
* ``per_probe_terms``: the series stops at the number of terms the probe's own
  remainder needs (thresholds per set) instead of the number the longest
  remainder needs;
* ``no_eigen``: the branch for intervals beyond the table left out (valid
  only when the table covers every interval: the benchmark then builds one);
* :func:`loop_lanes4`: four sets per loop body as arrays (n, 4), for the loop
  vectorizer.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from cavchar.models.probes.hmm_kernels import uniformization_terms

TERMS_WRITTEN = 6

_HEADER = ("import numpy as np\nfrom numba import njit, prange\n"
           "TINY = 1e-150\nHUGE = 1e150\n\n")


def _rescale(n, lanes, ind):
    out = [f"{ind}s_{lane} = " + " + ".join(f"b{j}_{lane}" for j in range(n))
           for lane in range(lanes)]
    cond = " and ".join(f"TINY <= s_{lane} <= HUGE" for lane in range(lanes))
    out.append(f"{ind}if {cond}:")
    out += [f"{ind}    a{j}_{lane} = b{j}_{lane}" for lane in range(lanes) for j in range(n)]
    out.append(f"{ind}else:")
    i2 = ind + "    "
    for lane in range(lanes):
        out.append(f"{i2}if TINY <= s_{lane} <= HUGE:")
        out += [f"{i2}    a{j}_{lane} = b{j}_{lane}" for j in range(n)]
        out += [f"{i2}elif s_{lane} > 0.0:", f"{i2}    ll_{lane} += np.log(s_{lane})",
                f"{i2}    inv = 1.0 / s_{lane}"]
        out += [f"{i2}    a{j}_{lane} = b{j}_{lane} * inv" for j in range(n)]
        out += [f"{i2}else:", f"{i2}    dead_{lane} = True"]
        out += [f"{i2}    a{j}_{lane} = 0.0" for j in range(n)]
    return out


def source(n: int, lanes: int = 1, per_probe_terms: bool = False, no_eigen: bool = False) -> str:
    """Source of ``forward(trans, sidx, rem, uni, rates, terms, right, lam, left, dts, p0,
    emis, offs, codes, starts, out, rthr)`` with arrays in the layout of
    :func:`to_lanes` (the last axis runs over the lanes)."""
    lr = range(lanes)
    ind, i2, i3, i4 = " " * 8, " " * 12, " " * 16, " " * 20
    kvar = "kt" if per_probe_terms else "kc"
    out = ['@njit(parallel=True, cache=False, nogil=True, fastmath={"contract"})',
           "def forward(trans, sidx, rem, uni, rates, terms, right, lam, left, dts, p0, emis, "
           "offs, codes, starts, out, rthr):",
           "    nseg = starts.shape[0] - 1", "    for c in prange(out.shape[0]):",
           f"{ind}E = emis[c]", f"{ind}O = offs[c]", f"{ind}P = trans[c]"]
    for row, name in enumerate("uvd"):
        out += [f"{ind}{name}{i}_{lane} = uni[c, {row}, {i}, {lane}]"
                for i in range(n) for lane in lr]
    out += [f"{ind}qc_{lane} = rates[c, {lane}]" for lane in lr] + [f"{ind}kc = terms[c]"]
    out += [f"{ind}total_{lane} = 0.0" for lane in lr] + [f"{ind}for g in range(nseg):"]
    out += [f"{i2}t0 = starts[g]", f"{i2}t1 = starts[g + 1]", f"{i2}code = codes[t0]"]
    out += [f"{i2}b{j}_{lane} = p0[c, {j}, {lane}] * E[code, {j}, {lane}]"
            for j in range(n) for lane in lr]
    out += [f"{i2}ll_{lane} = O[code, {lane}]" for lane in lr]
    out += [f"{i2}dead_{lane} = False" for lane in lr]
    out += _rescale(n, lanes, i2)
    out += [f"{i2}for t in range(t0 + 1, t1):", f"{i3}code = codes[t]", f"{i3}m = sidx[t]",
            f"{i3}if {'True' if no_eigen else 'm >= 0'}:"]
    for j in range(n):
        for lane in lr:
            terms = " + ".join(f"a{i}_{lane} * P[m, {i}, {j}, {lane}]" for i in range(n))
            out.append(f"{i4}y{j}_{lane} = {terms}")
    out += [f"{i4}x{j}_{lane} = y{j}_{lane}" for j in range(n) for lane in lr]
    out += [f"{i4}r = rem[t]"] + [f"{i4}z_{lane} = qc_{lane} * r" for lane in lr]
    out += [f"{i4}ll_{lane} -= z_{lane}" for lane in lr] + [f"{i4}w_{lane} = 1.0" for lane in lr]
    if per_probe_terms:
        out += [f"{i4}kt = 0", f"{i4}while r > rthr[c, kt]:", f"{i4}    kt += 1"]

    def term(ind_t, factor):
        lines = [f"{ind_t}w_{lane} *= z_{lane} * {factor}" for lane in lr]
        for j in range(n):
            for lane in lr:
                parts = [f"y{j}_{lane} * v{j}_{lane}"]
                if j > 0:
                    parts.insert(0, f"y{j - 1}_{lane} * u{j - 1}_{lane}")
                if j < n - 1:
                    parts.append(f"y{j + 1}_{lane} * d{j + 1}_{lane}")
                lines.append(f"{ind_t}f{j}_{lane} = " + " + ".join(parts))
        for j in range(n):
            for lane in lr:
                lines += [f"{ind_t}y{j}_{lane} = f{j}_{lane}",
                          f"{ind_t}x{j}_{lane} += w_{lane} * f{j}_{lane}"]
        return lines

    it = i4
    for kk in range(1, TERMS_WRITTEN + 1):
        out.append(f"{it}if {kvar} >= {kk}:")
        it += "    "
        out += term(it, repr(1.0 / kk))
    out.append(f"{it}for kk in range({TERMS_WRITTEN + 1}, {kvar} + 1):")
    out += term(it + "    ", "(1.0 / kk)")
    out += [f"{i3}else:", f"{i4}dd = dts[t]"]
    for lane in ([] if no_eigen else lr):
        for mm in range(n):
            terms = " + ".join(f"a{i}_{lane} * right[c, {i}, {mm}, {lane}]" for i in range(n))
            out.append(f"{i4}h{mm} = ({terms}) * np.exp(lam[c, {mm}, {lane}] * dd)")
        for j in range(n):
            terms = " + ".join(f"h{mm} * left[c, {mm}, {j}, {lane}]" for mm in range(n))
            out.append(f"{i4}x{j}_{lane} = max({terms}, 0.0)")
    out += [f"{i3}b{j}_{lane} = x{j}_{lane} * E[code, {j}, {lane}]"
            for j in range(n) for lane in lr]
    out += [f"{i3}ll_{lane} += O[code, {lane}]" for lane in lr]
    out += _rescale(n, lanes, i3)
    for lane in lr:
        s = " + ".join(f"a{j}_{lane}" for j in range(n))
        out += [f"{i2}if dead_{lane}:", f"{i2}    total_{lane} = -np.inf",
                f"{i2}else:", f"{i2}    total_{lane} += ll_{lane} + np.log({s})"]
    out += [f"{ind}out[c, {lane}] = total_{lane}" for lane in lr]
    return _HEADER + "\n".join(out) + "\n"


def build(n: int, **options):
    """Compile a variant (no on-disk cache); returns the numba function."""
    namespace: dict = {}
    exec(compile(source(n, **options), "grid_variant", "exec"), namespace)
    return namespace["forward"]


def to_lanes(tr, p0, emis, offs, lanes: int):
    """Grid transitions of k sets, the initial law, emission and offsets rearranged to
    groups of ``lanes`` sets (last axis), k padded by repeating the last set."""
    k = tr.matrices.shape[0]
    groups = -(-k // lanes)
    pad = np.concatenate([np.arange(k), np.full(groups * lanes - k, k - 1)]).astype(int)

    def arrange(a):
        a = np.asarray(a)[pad]
        a = a.reshape((groups, lanes) + a.shape[1:])
        return np.ascontiguousarray(np.moveaxis(a, 1, -1))

    terms = np.asarray(tr.terms)[pad].reshape(groups, lanes).max(axis=1)
    return (arrange(tr.matrices), tr.step_index, tr.remainder, arrange(tr.uniform),
            arrange(tr.rates), np.ascontiguousarray(terms), arrange(tr.right),
            arrange(tr.eigenvalues), arrange(tr.left), tr.dts, arrange(p0), arrange(emis),
            arrange(offs)), groups


def thresholds(rates, kmax: int = 20) -> np.ndarray:
    """``rthr[c, K]``: the longest remainder (s) for which K series terms suffice for set
    c (bisection on ``z = q r`` against :func:`uniformization_terms`), then inf."""
    zs = []
    for k in range(kmax):
        lo, hi = 0.0, 50.0
        for _ in range(100):
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if uniformization_terms(mid)[0] <= k else (lo, mid)
        zs.append(lo)
    out = np.asarray(zs)[None, :] / np.asarray(rates, dtype=float).reshape(-1)[:, None]
    return np.ascontiguousarray(np.concatenate([out, np.full((out.shape[0], 1), np.inf)], 1))


@njit(parallel=True, cache=False, nogil=True, fastmath={"contract"})
def loop_lanes4(trans, sidx, rem, uni, rates, terms, p0, emis, offs, codes, starts, out):
    """Four sets per loop body as (n, 4) arrays; the table must cover every interval."""
    n = p0.shape[1]
    for c in prange(out.shape[0]):
        P = trans[c]
        E = emis[c]
        O = offs[c]
        U = uni[c]
        a = np.empty((n, 4))
        y = np.empty((n, 4))
        f = np.empty((n, 4))
        x = np.empty((n, 4))
        acc = np.empty(4)
        s = np.empty(4)
        z = np.empty(4)
        w = np.empty(4)
        ll = np.zeros(4)
        total = np.zeros(4)
        dead = np.zeros(4, np.bool_)
        q = rates[c]
        kc = terms[c]
        for g in range(starts.shape[0] - 1):
            t0 = starts[g]
            t1 = starts[g + 1]
            code = codes[t0]
            for lane in range(4):
                ll[lane] = O[code, lane]
                dead[lane] = False
                s[lane] = 0.0
            for j in range(n):
                for lane in range(4):
                    a[j, lane] = p0[c, j, lane] * E[code, j, lane]
                    s[lane] += a[j, lane]
            for t in range(t0 + 1, t1 + 1):
                ok = True
                for lane in range(4):
                    if not (1e-150 <= s[lane] <= 1e150):
                        ok = False
                if not ok:
                    for lane in range(4):
                        if 1e-150 <= s[lane] <= 1e150:
                            pass
                        elif s[lane] > 0.0:
                            ll[lane] += np.log(s[lane])
                            inv = 1.0 / s[lane]
                            for j in range(n):
                                a[j, lane] *= inv
                            s[lane] = 1.0
                        else:
                            dead[lane] = True
                            for j in range(n):
                                a[j, lane] = 0.0
                if t == t1:
                    break
                code = codes[t]
                m = sidx[t]
                for j in range(n):
                    for lane in range(4):
                        acc[lane] = 0.0
                    for i in range(n):
                        for lane in range(4):
                            acc[lane] += a[i, lane] * P[m, i, j, lane]
                    for lane in range(4):
                        y[j, lane] = acc[lane]
                        x[j, lane] = acc[lane]
                r = rem[t]
                for lane in range(4):
                    z[lane] = q[lane] * r
                    ll[lane] -= z[lane]
                    w[lane] = 1.0
                for kk in range(1, kc + 1):
                    for lane in range(4):
                        w[lane] *= z[lane] / kk
                    for j in range(n):
                        for lane in range(4):
                            acc_j = y[j, lane] * U[1, j, lane]
                            if j > 0:
                                acc_j += y[j - 1, lane] * U[0, j - 1, lane]
                            if j + 1 < n:
                                acc_j += y[j + 1, lane] * U[2, j + 1, lane]
                            f[j, lane] = acc_j
                    for j in range(n):
                        for lane in range(4):
                            y[j, lane] = f[j, lane]
                            x[j, lane] += w[lane] * f[j, lane]
                for lane in range(4):
                    s[lane] = 0.0
                    ll[lane] += O[code, lane]
                for j in range(n):
                    for lane in range(4):
                        a[j, lane] = x[j, lane] * E[code, j, lane]
                        s[lane] += a[j, lane]
            for lane in range(4):
                total[lane] = -np.inf if dead[lane] else total[lane] + ll[lane] + np.log(s[lane])
        for lane in range(4):
            out[c, lane] = total[lane]


def source_eigen_table(n: int, degree: int = 5) -> str:
    """Eigen-basis grid: ``P(j h + r) = (P(j h) R) diag(exp(lambda r)) L`` with a table of
    ``P(j h) R`` (k, J, N, N) and ``exp(lambda r)`` by its Taylor polynomial of
    ``degree`` (Horner; ``|lambda r| <= |lambda|_max h``); intervals beyond the table by
    the eigen route.  ``forward(prt, sidx, rem, right, lam, left, dts, p0, emis, offs,
    codes, starts, out)``, arrays with k first (one set per loop body)."""
    ind, i2, i3, i4 = " " * 8, " " * 12, " " * 16, " " * 20
    out = ['@njit(parallel=True, cache=False, nogil=True, fastmath={"contract"})',
           "def forward(prt, sidx, rem, right, lam, left, dts, p0, emis, offs, codes, starts, "
           "out):", "    nseg = starts.shape[0] - 1", "    for c in prange(out.shape[0]):",
           f"{ind}E = emis[c]", f"{ind}O = offs[c]", f"{ind}T = prt[c]"]
    out += [f"{ind}l{m}_{j} = left[c, {m}, {j}]" for m in range(n) for j in range(n)]
    out += [f"{ind}w{m} = lam[c, {m}]" for m in range(n)]
    out += [f"{ind}total = 0.0", f"{ind}for g in range(nseg):"]
    out += [f"{i2}t0 = starts[g]", f"{i2}t1 = starts[g + 1]", f"{i2}code = codes[t0]"]
    out += [f"{i2}b{j} = p0[c, {j}] * E[code, {j}]" for j in range(n)]
    out += [f"{i2}ll = O[code]", f"{i2}dead = False"]
    s = " + ".join(f"b{j}" for j in range(n))
    resc = [f"{{i}}s = {s}", "{i}if TINY <= s <= HUGE:"]
    resc += [f"{{i}}    a{j} = b{j}" for j in range(n)]
    resc += ["{i}elif s > 0.0:", "{i}    ll += np.log(s)", "{i}    inv = 1.0 / s"]
    resc += [f"{{i}}    a{j} = b{j} * inv" for j in range(n)]
    resc += ["{i}else:", "{i}    dead = True"] + [f"{{i}}    a{j} = 0.0" for j in range(n)]
    out += [line.format(i=i2) for line in resc]
    out += [f"{i2}for t in range(t0 + 1, t1):", f"{i3}code = codes[t]", f"{i3}m = sidx[t]",
            f"{i3}if m >= 0:", f"{i4}r = rem[t]"]
    for mm in range(n):
        terms = " + ".join(f"a{i} * T[m, {i}, {mm}]" for i in range(n))
        poly = "1.0"
        for d in range(degree, 0, -1):
            poly = f"(1.0 + e{mm} * {1.0 / d!r} * {poly})" if d > 1 else f"(1.0 + e{mm} * {poly})"
        out += [f"{i4}e{mm} = w{mm} * r", f"{i4}h{mm} = ({terms}) * {poly}"]
    out += [f"{i3}else:", f"{i4}dd = dts[t]"]
    for mm in range(n):
        terms = " + ".join(f"a{i} * right[c, {i}, {mm}]" for i in range(n))
        out.append(f"{i4}h{mm} = ({terms}) * np.exp(w{mm} * dd)")
    for j in range(n):
        terms = " + ".join(f"h{mm} * l{mm}_{j}" for mm in range(n))
        out.append(f"{i3}b{j} = max({terms}, 0.0) * E[code, {j}]")
    out += [f"{i3}ll += O[code]"]
    out += [line.format(i=i3) for line in resc]
    out += [f"{i2}if dead:", f"{i2}    total = -np.inf", f"{i2}else:",
            f"{i2}    total += ll + np.log(" + " + ".join(f"a{j}" for j in range(n)) + ")"]
    out += [f"{ind}out[c] = total"]
    return _HEADER + "\n".join(out) + "\n"


def build_eigen_table(n: int, degree: int = 5):
    namespace: dict = {}
    exec(compile(source_eigen_table(n, degree), "grid_variant_eigen", "exec"), namespace)
    return namespace["forward"]


def eigen_table_args(tr, steps):
    """(prt, sidx, rem, right, lam, left, dts) for :func:`source_eigen_table` from grid
    transitions ``tr`` (their eigen parts) and the grid ``steps`` (s, (J,))."""
    decay = np.exp(tr.eigenvalues[:, None, :] * np.asarray(steps)[None, :, None])  # (k, J, N)
    prt = np.ascontiguousarray(tr.right[:, None] * decay[:, :, None, :])  # R diag(e^{lam jh})
    return (prt, tr.step_index, tr.remainder, tr.right, tr.eigenvalues, tr.left, tr.dts)
