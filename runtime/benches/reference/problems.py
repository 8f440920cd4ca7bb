#!/usr/bin/env python3
"""numpy/scipy reference implementations for the fieldbook-runtime benchmark.

Usage (called by the Rust bench harness):

    python3 problems.py PROBLEM [--repeat K] [--n N] [--dump] [--save FILE]
                                [--method ivp|expm|expm-block] [--make-reference]

PROBLEM is one of  p1, p1-expm, p2, p3, p4, p5  (see README.md next to this file).
Exactly ONE JSON line is printed to stdout:

    {"problem": ..., "seconds": [...], "max_error": ..., "threads": ...,
     "numpy": ..., "scipy": ..., ...problem-specific keys...}

"seconds" holds one wall time per repeat (time.perf_counter) covering only the
computation: interpreter start-up, imports, building the accuracy reference
and computing the error are all outside the timed region.

Units: angular frequencies in rad/s, times in s, hbar = 1.

Each problem is written the way one would write it by hand with numpy/scipy,
vectorised across the parameter sweep.  The BLAS thread count is whatever the
environment sets (OPENBLAS_NUM_THREADS etc.); this script never changes it.
"""

import argparse
import inspect
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
import scipy
import scipy.linalg
from scipy.integrate import solve_ivp

TWO_PI = 2.0 * np.pi
MHZ = TWO_PI * 1.0e6  # 2*pi x 1 MHz, in rad/s
US = 1.0e-6  # 1 microsecond, in s
HERE = Path(__file__).resolve().parent


# --------------------------------------------------------------------------
# Reporting helpers
# --------------------------------------------------------------------------
def blas_threads():
    """(thread count, source) for the BLAS in use."""
    try:
        from threadpoolctl import threadpool_info  # optional dependency

        blas = [d for d in threadpool_info() if d.get("user_api") == "blas"]
        if blas:
            return int(blas[0]["num_threads"]), "threadpoolctl"
    except ImportError:
        pass
    env = os.environ.get("OPENBLAS_NUM_THREADS")
    if env is not None:
        try:
            return int(env), "OPENBLAS_NUM_THREADS"
        except ValueError:
            return env, "OPENBLAS_NUM_THREADS"
    return None, "unset (library default)"


def blas_name():
    """Name/version of the BLAS numpy was built against (informational)."""
    try:
        info = np.show_config(mode="dicts")["Build Dependencies"]["blas"]
        return f"{info.get('name')} {info.get('version')}"
    except Exception:  # show_config layout is not a stable API
        return None


def warm_up():
    """Touch every library code path once on tiny inputs, untimed.

    Several scipy routines import helpers lazily on their first call; that is
    import cost, not computation, so it is paid here before any timing.
    """
    h = np.array([[0.0, 1.0], [1.0, -0.5]])
    np.linalg.eigh(h[None])
    np.linalg.solve(np.eye(4, dtype=complex)[None], np.ones((1, 4, 1), dtype=complex))
    np.einsum("im,imk->ik", np.ones((1, 2)), np.ones((1, 2, 2)))
    scipy.linalg.expm(-1j * h)
    solve_ivp(lambda t, y: -1j * (h @ y), (0.0, 1.0), np.array([1.0, 0.0], dtype=complex),
              method="DOP853", rtol=1e-8, atol=1e-10)


def timed(fn, repeat):
    """Run fn() `repeat` times; return (per-repeat seconds, last result)."""
    seconds, result = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = fn()
        seconds.append(time.perf_counter() - t0)
    return seconds, result


def rabi_pe(omega, delta, t):
    """Rabi formula P_e = O^2/(O^2+D^2) sin^2(sqrt(O^2+D^2) t/2) (broadcasts)."""
    w2 = omega**2 + delta**2
    return omega**2 / w2 * np.sin(0.5 * np.sqrt(w2) * t) ** 2


# --------------------------------------------------------------------------
# p1: two-level chevron, square pulse
# --------------------------------------------------------------------------
P1_OMEGA = 1.0 * MHZ
P1_DELTAS = np.linspace(-5.0 * MHZ, 5.0 * MHZ, 201)
P1_TIMES = np.linspace(0.0, 3.0 * US, 201)


def p1_compute(omega=P1_OMEGA, deltas=P1_DELTAS, times=P1_TIMES):
    """P_e[i, k] = P_e(deltas[i], times[k]) from c(0) = g.

    One batched eigh of the stacked 2x2 Hamiltonians H_i = [[0, O/2], [O/2, -D_i]],
    then c(t) = V exp(-i w t) V^+ c(0) for all (i, k) by broadcasting.
    """
    nd = deltas.size
    h = np.zeros((nd, 2, 2))
    h[:, 0, 1] = h[:, 1, 0] = 0.5 * omega
    h[:, 1, 1] = -deltas
    w, v = np.linalg.eigh(h)  # w: (nd, 2), v: (nd, 2, 2), columns = eigenvectors
    # overlap of each eigenvector with g:  <m|g> = conj(v[:, 0, m])
    # amplitude on e: c_e = sum_m v[:, 1, m] <m|g> exp(-i w_m t)
    weights = v[:, 1, :] * v[:, 0, :].conj()  # (nd, 2)
    phases = np.exp(-1j * w[:, :, None] * times[None, None, :])  # (nd, 2, nt)
    c_e = np.einsum("im,imk->ik", weights, phases)
    return np.abs(c_e) ** 2


def run_p1(args):
    seconds, pe = timed(p1_compute, args.repeat)
    exact = rabi_pe(P1_OMEGA, P1_DELTAS[:, None], P1_TIMES[None, :])
    out = {
        "problem": "p1",
        "seconds": seconds,
        "max_error": float(np.max(np.abs(pe - exact))),
        "shape": list(pe.shape),
        "checksum": float(pe.sum()),
    }
    if args.save:
        save_json(args.save, {"deltas": P1_DELTAS.tolist(), "times": P1_TIMES.tolist(),
                              "p_e": pe.tolist()})
    return out


# p1-expm: the same physics, one scipy.linalg.expm per grid point on 2000 points
P1_SUBSET = np.linspace(0, P1_DELTAS.size * P1_TIMES.size - 1, 2000).round().astype(int)


def p1_expm_compute(flat_idx=P1_SUBSET):
    i_d, i_t = np.unravel_index(flat_idx, (P1_DELTAS.size, P1_TIMES.size))
    pe = np.empty(flat_idx.size)
    for k, (i, j) in enumerate(zip(i_d, i_t)):
        h = np.array([[0.0, 0.5 * P1_OMEGA], [0.5 * P1_OMEGA, -P1_DELTAS[i]]])
        u = scipy.linalg.expm(-1j * h * P1_TIMES[j])
        pe[k] = abs(u[1, 0]) ** 2  # c(0) = g, so c_e = U[e, g]
    return pe


def run_p1_expm(args):
    seconds, pe = timed(p1_expm_compute, args.repeat)
    i_d, i_t = np.unravel_index(P1_SUBSET, (P1_DELTAS.size, P1_TIMES.size))
    exact = rabi_pe(P1_OMEGA, P1_DELTAS[i_d], P1_TIMES[i_t])
    return {
        "problem": "p1-expm",
        "seconds": seconds,
        "per_point_seconds": [s / P1_SUBSET.size for s in seconds],
        "points": int(P1_SUBSET.size),
        "subset": "flat row-major indices i_delta*201 + i_t = round(linspace(0, 40400, 2000))",
        "max_error": float(np.max(np.abs(pe - exact))),
    }


# --------------------------------------------------------------------------
# p2: STIRAP in a Lambda system, sweep of the two-photon detuning
# --------------------------------------------------------------------------
P2 = dict(omega0=5.0 * MHZ, sigma=1.0 * US, t_s=4.5 * US, t_p=5.5 * US,
          t_final=10.0 * US, delta_1=0.0)
P2_DELTAS = np.linspace(-2.0 * MHZ, 2.0 * MHZ, 1001)
P2_REF_IDX = np.arange(0, 1001, 100)  # 11 points = linspace(-2, 2, 11) x 2pi MHz


def p2_pulses(t):
    g = lambda t0: P2["omega0"] * np.exp(-((t - t0) ** 2) / (2.0 * P2["sigma"] ** 2))
    return g(P2["t_p"]), g(P2["t_s"])  # (pump, Stokes)


def p2_solve(deltas, rtol, atol):
    """Final P_r for every two-photon detuning in `deltas`, one stacked solve.

    State layout: y = [c_g(all deltas), c_e(all deltas), c_r(all deltas)],
    H = [[0, Op/2, 0], [Op/2, -Delta, Os/2], [0, Os/2, -delta]].
    """
    m = deltas.size
    d1 = P2["delta_1"]

    def rhs(t, y):
        op, os_ = p2_pulses(t)
        g, e, r = y[:m], y[m:2 * m], y[2 * m:]
        dy = np.empty_like(y)
        dy[:m] = -0.5j * op * e
        dy[m:2 * m] = -1j * (0.5 * op * g - d1 * e + 0.5 * os_ * r)
        dy[2 * m:] = -1j * (0.5 * os_ * e - deltas * r)
        return dy

    y0 = np.zeros(3 * m, dtype=complex)
    y0[:m] = 1.0
    sol = solve_ivp(rhs, (0.0, P2["t_final"]), y0, method="DOP853",
                    rtol=rtol, atol=atol)
    if not sol.success:
        raise RuntimeError(sol.message)
    return np.abs(sol.y[2 * m:, -1]) ** 2, sol.nfev


def run_p2(args):
    seconds, (pr, nfev) = timed(lambda: p2_solve(P2_DELTAS, 1e-8, 1e-10), args.repeat)
    # tight reference, outside the timed region: one solve per delta
    ref_deltas = P2_DELTAS[P2_REF_IDX]
    ref = np.array([p2_solve(np.array([d]), 1e-12, 1e-14)[0][0] for d in ref_deltas])
    out = {
        "problem": "p2",
        "seconds": seconds,
        "max_error": float(np.max(np.abs(pr[P2_REF_IDX] - ref))),
        "nfev": int(nfev),
        "reference_deltas": ref_deltas.tolist(),
        "reference_values": ref.tolist(),
        "values_at_reference": pr[P2_REF_IDX].tolist(),
        "p_r_min": float(pr.min()),
        "p_r_max": float(pr.max()),
    }
    if args.save:
        save_json(args.save, {"deltas": P2_DELTAS.tolist(), "p_r": pr.tolist()})
    return out


# --------------------------------------------------------------------------
# p3: N-level Lindblad cascade with a random dense Hamiltonian
# --------------------------------------------------------------------------
P3_GAMMA = 0.5 * MHZ
P3_T = 2.0 * US
P3_SEED = 7


def p3_model(n):
    """The exact model construction (the Rust side reads it from --dump).

    rng = default_rng(7); A = (standard_normal((n, n)) + 1j*standard_normal((n, n)))
    * 2pi x 1 MHz   (real part drawn first, then imaginary part);
    H = (A + A^H)/2 + diag(linspace(0, 2pi x 3 MHz, n)).
    Jump operators sqrt(Gamma)|k-1><k| for k = 1..n-1; rho0 = |n-1><n-1|.
    """
    rng = np.random.default_rng(P3_SEED)
    a = (rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n))) * MHZ
    h = 0.5 * (a + a.conj().T) + np.diag(np.linspace(0.0, 3.0 * MHZ, n))
    rho0 = np.zeros((n, n), dtype=complex)
    rho0[n - 1, n - 1] = 1.0
    return h, rho0


def p3_solve(h, rho0, rtol=1e-8, atol=1e-10):
    """Final rho from solve_ivp on the flattened complex rho.

    drho/dt = -i[H, rho] + D(rho), and for the cascade k -> k-1 at rate Gamma
      D(rho)_ij = -(g_i + g_j)/2 rho_ij + delta_ij Gamma rho_{i+1,i+1}
    with g_0 = 0, g_k = Gamma (k >= 1), the refill term only for i < n-1.
    """
    n = h.shape[0]
    gam = np.full(n, P3_GAMMA)
    gam[0] = 0.0
    damp = -0.5 * (gam[:, None] + gam[None, :])  # decay of coherences/populations
    diag = np.arange(n - 1)  # indices (i, i) receiving population from (i+1, i+1)

    def rhs(t, y):
        rho = y.reshape(n, n)
        d = -1j * (h @ rho - rho @ h) + damp * rho
        d[diag, diag] += P3_GAMMA * rho[diag + 1, diag + 1]
        return d.reshape(-1)

    sol = solve_ivp(rhs, (0.0, P3_T), rho0.reshape(-1), method="DOP853",
                    rtol=rtol, atol=atol, t_eval=[P3_T])
    if not sol.success:
        raise RuntimeError(sol.message)
    return sol.y[:, -1].reshape(n, n), sol.nfev


def p3_liouvillian(h):
    """n^2 x n^2 Liouvillian, row-major vec (vec(A rho B) = kron(A, B^T) vec rho)."""
    n = h.shape[0]
    eye = np.eye(n)
    sup = -1j * (np.kron(h, eye) - np.kron(eye, h.T))
    for k in range(1, n):
        c = np.zeros((n, n))
        c[k - 1, k] = np.sqrt(P3_GAMMA)
        cdc = c.T @ c
        sup += np.kron(c, c) - 0.5 * (np.kron(cdc, eye) + np.kron(eye, cdc.T))
    return sup


def run_p3(args):
    n = args.n
    h, rho0 = p3_model(n)
    seconds, (rho, nfev) = timed(lambda: p3_solve(h, rho0), args.repeat)
    # reference outside the timed region: exact propagator of the Liouvillian
    ref = (scipy.linalg.expm(p3_liouvillian(h) * P3_T) @ rho0.reshape(-1)).reshape(n, n)
    out = {
        "problem": "p3",
        "n": n,
        "seconds": seconds,
        "max_error": float(np.max(np.abs(rho - ref))),
        "nfev": int(nfev),
        "trace_final": float(np.trace(rho).real),
        "ground_population_final": float(rho[0, 0].real),
    }
    if args.dump:
        path = Path(args.dump_dir) / f"p3_model_{n}.json"
        flat = lambda m: {"n": n, "re": m.reshape(-1).real.tolist(),
                          "im": m.reshape(-1).imag.tolist()}
        save_json(path, {
            "n": n,
            "seed": P3_SEED,
            "construction": inspect.cleandoc(p3_model.__doc__),
            "h": flat(h),
            "gamma": P3_GAMMA,
            "jump_operators": "sqrt(gamma) |k-1><k| for k = 1..n-1",
            "t_final": P3_T,
            "rho0_index": n - 1,
            "rho_final_reference": flat(ref),
            "reference_method": "scipy.linalg.expm(L * t_final) @ vec(rho0), row-major vec",
            "storage": "matrices row-major flat: M[i,j] = re[i*n+j] + 1j*im[i*n+j]",
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "python": platform.python_version(),
        })
        out["dumped"] = str(path)
    return out


# --------------------------------------------------------------------------
# p4: two-level steady state over a detuning sweep
# --------------------------------------------------------------------------
P4_GAMMA = 6.0 * MHZ
P4_OMEGA = 4.0 * MHZ
P4_DELTAS = np.linspace(-50.0 * MHZ, 50.0 * MHZ, 10001)


def p4_compute(omega=P4_OMEGA, gamma=P4_GAMMA, deltas=P4_DELTAS):
    """rho_ee for every Delta: stacked 4x4 Liouvillians, one batched solve.

    Row-major vec (gg, ge, eg, ee).  L = L0 + Delta * L1 where, for
    H = [[0, O/2], [O/2, -Delta]] and decay sqrt(Gamma)|g><e|,
      L0 holds the drive and the decay, L1 the detuning part of -i[H, .].
    The rho_gg equation (row 0) is replaced by Tr rho = rho_gg + rho_ee = 1.
    """
    o = 0.5 * omega
    # d rho/dt components, written out from -i[H, rho] + dissipator:
    l0 = np.array([
        #  gg        ge          eg          ee
        [0.0,      1j * o,    -1j * o,     gamma],       # d rho_gg
        [1j * o,   -gamma / 2, 0.0,        -1j * o],     # d rho_ge
        [-1j * o,  0.0,        -gamma / 2,  1j * o],     # d rho_eg
        [0.0,      -1j * o,    1j * o,     -gamma],      # d rho_ee
    ])
    l1 = np.diag([0.0, -1j, 1j, 0.0])  # -i[H_Delta, rho] with H_Delta = -Delta |e><e|
    a = l0[None, :, :] + deltas[:, None, None] * l1[None, :, :]
    a[:, 0, :] = [1.0, 0.0, 0.0, 1.0]  # trace condition
    b = np.zeros((deltas.size, 4, 1), dtype=complex)
    b[:, 0, 0] = 1.0
    x = np.linalg.solve(a, b)[:, :, 0]
    return x[:, 3].real


def run_p4(args):
    seconds, ree = timed(p4_compute, args.repeat)
    s = 2.0 * P4_OMEGA**2 / P4_GAMMA**2
    exact = 0.5 * s / (1.0 + s + 4.0 * P4_DELTAS**2 / P4_GAMMA**2)
    out = {
        "problem": "p4",
        "seconds": seconds,
        "max_error": float(np.max(np.abs(ree - exact))),
        "points": int(P4_DELTAS.size),
        "rho_ee_max": float(ree.max()),
    }
    if args.save:
        save_json(args.save, {"deltas": P4_DELTAS.tolist(), "rho_ee": ree.tolist()})
    return out


# --------------------------------------------------------------------------
# p5: optical pumping on the full 87Rb D2 hyperfine manifold (24 sublevels)
# --------------------------------------------------------------------------
P5_MODEL = HERE / "p5_model.json"
P5_REFERENCE = HERE / "p5_reference.json"


def p5_load(path=P5_MODEL):
    """(model dict, H, jumps as arrays (from, to, rate), rho0, sample times) from the JSON
    model the Rust bench writes (`cargo bench ... --bench compare -- p5-dump`)."""
    with open(path) as fh:
        m = json.load(fh)
    n = m["n"]
    h = (np.array(m["h"]["re"]) + 1j * np.array(m["h"]["im"])).reshape(n, n)
    frm = np.array([j["from"] for j in m["jumps"]], dtype=int)
    to = np.array([j["to"] for j in m["jumps"]], dtype=int)
    rate = np.array([j["rate"] for j in m["jumps"]])
    rho0 = np.diag(np.array(m["rho0_diagonal"], dtype=complex))
    return m, h, (frm, to, rate), rho0, np.array(m["sample_times"])


def p5_ivp(h, jumps, rho0, times, rtol=1e-8, atol=1e-10):
    """rho at every sample time from solve_ivp(DOP853) on the flattened complex rho.

    drho/dt = -i[H, rho] + sum_k (L_k rho L_k^+ - {L_k^+ L_k, rho}/2) with L_k = sqrt(r_k)|t_k><f_k|,
    written out:  -i(M - M^+) with M = H rho (H and rho Hermitian),
      - (g_i + g_j)/2 rho_ij  (g_i = total rate out of level i),
      + delta_ij sum_k r_k [t_k = i] rho_{f_k f_k}  (the feeding matrix applied to diag rho).
    """
    n = h.shape[0]
    frm, to, rate = jumps
    out_rate = np.zeros(n)
    np.add.at(out_rate, frm, rate)
    damp = -0.5 * (out_rate[:, None] + out_rate[None, :])
    feed = np.zeros((n, n))
    np.add.at(feed, (to, frm), rate)
    idx = np.arange(n)

    def rhs(t, y):
        rho = y.reshape(n, n)
        m = h @ rho
        d = -1j * (m - m.conj().T) + damp * rho
        d[idx, idx] += feed @ rho[idx, idx]
        return d.reshape(-1)

    sol = solve_ivp(rhs, (0.0, times[-1]), rho0.reshape(-1), method="DOP853",
                    rtol=rtol, atol=atol, t_eval=times)
    if not sol.success:
        raise RuntimeError(sol.message)
    return sol.y.T.reshape(times.size, n, n), sol.nfev


def p5_liouvillian(h, jumps):
    """n^2 x n^2 Liouvillian on the row-major vec (vec(A rho B) = kron(A, B^T) vec rho).

    The jumps |t><f| only damp (rho_ij at (g_i + g_j)/2) and feed rho_tt from rho_ff, so those
    entries are written directly instead of summing one kron product per jump."""
    n = h.shape[0]
    frm, to, rate = jumps
    eye = np.eye(n)
    sup = -1j * (np.kron(h, eye) - np.kron(eye, h.T))
    out_rate = np.zeros(n)
    np.add.at(out_rate, frm, rate)
    sup[np.diag_indices(n * n)] -= 0.5 * (out_rate[:, None] + out_rate[None, :]).reshape(-1)
    np.add.at(sup, (to * (n + 1), frm * (n + 1)), rate)
    return sup


def p5_expm(h, jumps, rho0, times):
    """rho at every sample time: one scipy.linalg.expm(L dt) for the uniform spacing dt, then
    one matrix-vector product per sample (H is constant in the rotating frame)."""
    n = h.shape[0]
    dt = times[1] - times[0]
    if not np.allclose(np.diff(times), dt, rtol=1e-12, atol=0.0):
        raise ValueError("p5 sample times must be uniform")
    prop = scipy.linalg.expm(p5_liouvillian(h, jumps) * dt)
    out = np.empty((times.size, n * n), dtype=complex)
    out[0] = rho0.reshape(-1)
    for k in range(1, times.size):
        out[k] = prop @ out[k - 1]
    return out.reshape(times.size, n, n)


def p5_expm_block(model, h, jumps, rho0, times):
    """As p5_expm, on the block a conserved quantity selects. sigma+ light conserves
    q = m (ground) or m - 1 (excited), and decay feeds populations from populations, so from a
    diagonal rho0 only rho_ij with q_i = q_j can become non-zero: 102 of the 576 entries of
    vec(rho).  The Liouvillian is written on those entries only (the row-major vec rule of
    p5_liouvillian, entry by entry), exponentiated, and the result scattered back."""
    n = h.shape[0]
    q2 = np.array([s["two_m"] - 2 * s["excited"] for s in model["sublevels"]])
    same = (q2[:, None] == q2[None, :]).reshape(-1)
    if np.any(rho0.reshape(-1)[~same] != 0):
        raise ValueError("rho0 leaves the q block")
    idx = np.flatnonzero(same)
    dt = times[1] - times[0]
    if not np.allclose(np.diff(times), dt, rtol=1e-12, atol=0.0):
        raise ValueError("p5 sample times must be uniform")
    # rho_ij gets -i(H_ik delta_jl - delta_ik H_lj) rho_kl from the commutator, for the kept
    # (i, j) and (k, l); then the damping and the feeding of populations, which all are kept.
    i, j = np.divmod(idx, n)
    block = -1j * (h[i[:, None], i[None, :]] * (j[:, None] == j[None, :])
                   - (i[:, None] == i[None, :]) * h[j[None, :], j[:, None]])
    frm, to, rate = jumps
    out_rate = np.zeros(n)
    np.add.at(out_rate, frm, rate)
    block[np.diag_indices(idx.size)] -= 0.5 * (out_rate[i] + out_rate[j])
    position = np.full(n * n, -1)
    position[idx] = np.arange(idx.size)
    np.add.at(block, (position[to * (n + 1)], position[frm * (n + 1)]), rate)
    prop = scipy.linalg.expm(block * dt)
    out = np.zeros((times.size, n * n), dtype=complex)
    v = rho0.reshape(-1)[idx]
    out[0, idx] = v
    for k in range(1, times.size):
        v = prop @ v
        out[k, idx] = v
    return out.reshape(times.size, n, n)


def p5_make_reference(args):
    """The tight reference, written to p5_reference.json: rho(t_k) = expm(L t_k) vec(rho0) for
    each sample separately (no propagator reused), cross-checked against solve_ivp(DOP853) at
    rtol 1e-12, atol 1e-14."""
    m, h, jumps, rho0, times = p5_load()
    sup = p5_liouvillian(h, jumps)
    ref = np.array([(scipy.linalg.expm(sup * t) @ rho0.reshape(-1)).reshape(rho0.shape)
                    for t in times])
    tight, nfev = p5_ivp(h, jumps, rho0, times, rtol=1e-12, atol=1e-14)
    k = m["stretched_index"]
    payload = {
        "model": str(P5_MODEL.name),
        "sample_times": times.tolist(),
        "stretched_population": ref[:, k, k].real.tolist(),
        "rho_final": {"n": m["n"], "re": ref[-1].real.reshape(-1).tolist(),
                      "im": ref[-1].imag.reshape(-1).tolist()},
        "method": "scipy.linalg.expm(L * t_k) @ vec(rho0) for every sample time separately",
        "cross_check": "solve_ivp DOP853 rtol 1e-12 atol 1e-14",
        "cross_check_max_abs_diff": float(np.max(np.abs(tight - ref))),
        "cross_check_nfev": int(nfev),
        "storage": "matrices row-major flat: M[i,j] = re[i*n+j] + 1j*im[i*n+j]",
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": platform.python_version(),
    }
    save_json(P5_REFERENCE, payload)
    return {"problem": "p5", "seconds": [], "max_error": payload["cross_check_max_abs_diff"],
            "written": str(P5_REFERENCE)}


def p5_error(rho, k):
    """max over samples of |delta P_stretched| and over the final rho of |delta rho_ij|."""
    with open(P5_REFERENCE) as fh:
        ref = json.load(fh)
    pop = np.array(ref["stretched_population"])
    final = (np.array(ref["rho_final"]["re"]) + 1j * np.array(ref["rho_final"]["im"]))
    return float(max(np.max(np.abs(rho[:, k, k].real - pop)),
                     np.max(np.abs(rho[-1].reshape(-1) - final))))


def run_p5(args):
    if args.make_reference:
        return p5_make_reference(args)
    m, h, jumps, rho0, times = p5_load()
    k = m["stretched_index"]
    out = {"problem": "p5", "method": args.method}
    if args.method == "ivp":
        seconds, (rho, nfev) = timed(lambda: p5_ivp(h, jumps, rho0, times), args.repeat)
        out["nfev"] = int(nfev)
    elif args.method == "expm":
        seconds, rho = timed(lambda: p5_expm(h, jumps, rho0, times), args.repeat)
    else:
        seconds, rho = timed(lambda: p5_expm_block(m, h, jumps, rho0, times), args.repeat)
    out.update({
        "seconds": seconds,
        "max_error": p5_error(rho, k),
        "stretched_population": rho[:, k, k].real.tolist(),
        "trace_final": float(np.trace(rho[-1]).real),
    })
    return out


# --------------------------------------------------------------------------
def save_json(path, payload):
    with open(path, "w") as fh:
        json.dump(payload, fh)
        fh.write("\n")


RUNNERS = {"p1": run_p1, "p1-expm": run_p1_expm, "p2": run_p2, "p3": run_p3, "p4": run_p4,
           "p5": run_p5}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("problem", choices=sorted(RUNNERS))
    ap.add_argument("--repeat", type=int, default=5, help="timed repeats (default 5)")
    ap.add_argument("--n", type=int, default=8, choices=[4, 8, 16, 32],
                    help="number of levels for p3 (default 8)")
    ap.add_argument("--dump", action="store_true",
                    help="p3: write the model to p3_model_N.json")
    ap.add_argument("--dump-dir", default=str(HERE),
                    help="directory for --dump (default: next to this script)")
    ap.add_argument("--method", default="ivp", choices=["ivp", "expm", "expm-block"],
                    help="p5: solve_ivp(DOP853) on rho, expm of the whole Liouvillian, or expm "
                         "of its conserved-m block (default ivp)")
    ap.add_argument("--make-reference", action="store_true",
                    help="p5: write the tight reference p5_reference.json (untimed)")
    ap.add_argument("--save", default=None,
                    help="p1/p2/p4: also write the full output array to this JSON file")
    args = ap.parse_args(argv)
    if args.repeat < 1:
        ap.error("--repeat must be >= 1")

    warm_up()
    out = RUNNERS[args.problem](args)
    threads, source = blas_threads()
    out.update({
        "threads": threads,
        "threads_source": source,
        "blas": blas_name(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": platform.python_version(),
    })
    print(json.dumps(out))
    return 0


if __name__ == "__main__":
    sys.exit(main())
