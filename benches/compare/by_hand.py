#!/usr/bin/env python3
"""The per-point work of `looprate sweep`, written the way an engineer would
write it by hand with scipy.signal, as a speed baseline.

For one loop (plant P, sensor H, continuous controller C, each as numerator /
denominator coefficient lists in descending powers of s) and each chosen grid
point (rate, method, computation delay d):

  1. discretize C(s) (scipy `cont2discrete`; `pole-zero-match` and `tustin-prewarped`
     by hand with numpy),
  2. exact fractional-delay zero-order-hold equivalent of P*H with two
     `scipy.linalg.expm` calls of the augmented matrix [[A, B], [0, 0]]:
     Phi, Gamma0 = int_0^{T-tau}, Gamma1 = e^{A(T-tau)} int_0^tau,
  3. close the loop in state space, check stability from the eigenvalues,
  4. step response with `dlsim` over a horizon set by the slowest closed-loop
     pole (decay to 1e-4, capped at 200000 samples), plus the plant output at
     16 evenly spaced points per period from expm sub-steps (vectorised),
     then overshoot, 2 % settling and 10-90 % rise; the same for a unit
     load step at the plant input (peak and recovery), as looprate does
     (`--no-disturbance` leaves it out: the lighter baseline of earlier
     runs),
  5. loop gain L = C(z) G(z) on a 500-point log grid with `dfreqresp`,
     gain / phase margins by linear interpolation between grid points,
     delay margin and the sensitivity peak on the grid.

Usage:
  by_hand.py --case CASE.json [--points N] [--seed S] [--csv OUT.csv]

CASE.json: {"plant": [num, den], "sensor": [num, den], "controller": [num, den],
            "rates": {"min_hz", "max_hz", "points", "spacing"},
            "methods": [...], "delays": [...], "prewarp_hz": optional}
Method names are looprate's (step-invariant, ramp-invariant,
impulse-invariant, tustin, tustin-prewarped, pole-zero-match, forward-euler,
backward-euler).

Prints points per second over the N timed points. Only the per-point work is
timed; reading the case and the continuous crossover (the default pre-warp
frequency, computed once per case) are not.
"""

import argparse
import csv
import json
import sys
import time
import warnings

import numpy as np
import scipy.linalg as sla
import scipy.signal as sig

SUB = 16            # intersample points per period
DECAY = 1e-4        # horizon: slowest closed-loop mode decays to this
MAX_SAMPLES = 200_000
NFREQ = 500
BAND = 0.02

# tf2ss/normalize warn about leading zero numerator coefficients that
# cont2discrete produces; harmless here
warnings.filterwarnings("ignore", category=sig.BadCoefficients)

SCIPY_NAME = {
    "step-invariant": "zoh",
    "ramp-invariant": "foh",
    "impulse-invariant": "impulse",
    "tustin": "bilinear",
    "forward-euler": "euler",
    "backward-euler": "backward_diff",
}


# ---------------------------------------------------------------- controller

def _roots(p):
    p = np.trim_zeros(np.asarray(p, float), "f")
    return np.roots(p) if len(p) > 1 else np.array([])


def matched(num, den, T):
    """Pole-zero matching by hand: z = e^{sT}, zeros at infinity to z = -1,
    gain matched at s = 0 / z = 1 (after removing the poles/zeros there)."""
    num = np.trim_zeros(np.asarray(num, float), "f")
    den = np.trim_zeros(np.asarray(den, float), "f")
    z, p = _roots(num), _roots(den)
    kc = num[0] / den[0]
    tol = 1e-12
    z0 = np.abs(z) < tol * max(1.0, np.max(np.abs(z), initial=0.0))
    p0 = np.abs(p) < tol * max(1.0, np.max(np.abs(p), initial=0.0))
    k = int(p0.sum() - z0.sum())
    # lim s->0 s^k C(s)
    cont = kc * np.prod(-z[~z0]) / np.prod(-p[~p0])
    zd = np.concatenate([np.exp(z * T), -np.ones(len(p) - len(z))])
    pd = np.exp(p * T)
    zd1 = np.abs(zd - 1) < 1e-12
    pd1 = np.abs(pd - 1) < 1e-12
    # lim z->1 ((z-1)/T)^k C(z) for unit gain
    disc = np.prod(1 - zd[~zd1]) / np.prod(1 - pd[~pd1]) / T ** k
    kd = np.real(cont / disc)
    return np.real(kd * np.poly(zd)), np.real(np.poly(pd))


def discretize(num, den, T, method, w0):
    if method == "pole-zero-match":
        return matched(num, den, T)
    if method == "tustin-prewarped":
        if w0 * T >= np.pi:
            return None  # infeasible at this rate
        # s = k (z-1)/(z+1), k = w0/tan(w0 T/2): plain bilinear at T' = 2/k
        k = w0 / np.tan(w0 * T / 2)
        nd, dd, _ = sig.cont2discrete((num, den), 2.0 / k, method="bilinear")
        return np.ravel(nd), np.ravel(dd)
    if method == "impulse-invariant":
        # scipy's impulse method takes strictly proper systems only: split
        # off the feedthrough D and add it back, C(z) = D + C_sp(z)
        num = np.trim_zeros(np.asarray(num, float), "f")
        den = np.trim_zeros(np.asarray(den, float), "f")
        if len(num) == len(den):
            dcoef = num[0] / den[0]
            rest = np.polysub(num, dcoef * den)
            nd, dd, _ = sig.cont2discrete((rest, den), T, method="impulse")
            nd, dd = np.ravel(nd), np.ravel(dd)
            return np.polyadd(nd, dcoef * dd), dd
    nd, dd, _ = sig.cont2discrete((num, den), T, method=SCIPY_NAME[method])
    return np.ravel(nd), np.ravel(dd)


# --------------------------------------------------------------------- plant

def plant_sensor_ss(plant, sensor):
    """Series P then H; states [xP; xH]. Returns A, B, Cy (plant output y),
    Cm (measured y_m). P*H must be strictly proper (as in the bench case)."""
    Ap, Bp, Cp, Dp = sig.tf2ss(*plant)
    Ah, Bh, Ch, Dh = sig.tf2ss(*sensor)
    n1, n2 = Ap.shape[0], Ah.shape[0]
    A = np.block([[Ap, np.zeros((n1, n2))], [Bh @ Cp, Ah]])
    B = np.vstack([Bp, Bh @ Dp])
    Cy = np.hstack([Cp, np.zeros((1, n2))])
    Cm = np.hstack([Dh @ Cp, Ch])
    assert abs((Dh @ Dp).item()) == 0.0 and abs(Dp.item()) == 0.0, \
        "by_hand.py assumes a strictly proper plant"
    return A, B, Cy, Cm


def hold_int(A, B, h):
    """(e^{Ah}, int_0^h e^{As} ds B) from one augmented expm (Van Loan)."""
    n = A.shape[0]
    M = np.zeros((n + 1, n + 1))
    M[:n, :n] = A
    M[:n, n:] = B
    E = sla.expm(M * h)
    return E[:n, :n], E[:n, n:]


def fractional_zoh(A, B, T, tau):
    Ea, G0 = hold_int(A, B, T - tau)
    Eb, Gt = hold_int(A, B, tau)
    return Ea @ Eb, G0, Ea @ Gt


# ------------------------------------------------------------------ figures

def step_figures(t, y, yf):
    if yf == 0:
        return dict(overshoot_pct=np.nan, settling_time_s=np.nan, rise_time_s=np.nan)
    s = np.sign(yf)
    ov = max(0.0, (np.max(s * y) - abs(yf)) / abs(yf) * 100)
    out = np.abs(y - yf) > BAND * abs(yf)
    if out[-1]:
        ts = np.nan  # not settled
    else:
        idx = np.nonzero(out)[0]
        ts = t[idx[-1] + 1] if len(idx) else 0.0
    r = s * y / abs(yf)
    i10 = np.argmax(r >= 0.1) if np.any(r >= 0.1) else None
    i90 = np.argmax(r >= 0.9) if np.any(r >= 0.9) else None
    tr = t[i90] - t[i10] if i10 is not None and i90 is not None else np.nan
    return dict(overshoot_pct=ov, settling_time_s=ts, rise_time_s=tr)


def margins(w, L):
    mag = np.abs(L)
    ph = np.unwrap(np.angle(L))
    phd = np.degrees(ph)
    lm = np.log(mag)
    gm = np.inf
    # phase crossings of -180 (mod 360)
    k = np.floor((phd + 180.0) / 360.0)
    for i in np.nonzero(np.diff(k))[0]:
        target = 360.0 * max(k[i], k[i + 1]) - 180.0
        f = (target - phd[i]) / (phd[i + 1] - phd[i])
        g = -20 * (lm[i] + f * (lm[i + 1] - lm[i])) / np.log(10)
        gm = min(gm, g)
    pm, wc, dm = np.inf, np.nan, np.inf
    for i in np.nonzero(np.diff(np.sign(lm)))[0]:
        f = -lm[i] / (lm[i + 1] - lm[i])
        lw = np.log(w[i]) + f * (np.log(w[i + 1]) - np.log(w[i]))
        wi = np.exp(lw)
        p = phd[i] + f * (phd[i + 1] - phd[i])
        m = (180.0 + p + 180.0) % 360.0 - 180.0
        if m == -180.0:
            m = 180.0
        if m < pm:
            pm, wc = m, wi
        dm = min(dm, np.radians(m) / wi)
    ms = np.max(1.0 / np.abs(1.0 + L))
    return dict(gain_margin_db=gm, phase_margin_deg=pm,
                crossover_hz=wc / (2 * np.pi), delay_margin_s=dm,
                sensitivity_peak=ms)


def continuous_crossover(plant, sensor, ctrl):
    """Gain crossover of C(s)P(s)H(s) in rad/s (default pre-warp freq.)."""
    num = np.polymul(np.polymul(plant[0], sensor[0]), ctrl[0])
    den = np.polymul(np.polymul(plant[1], sensor[1]), ctrl[1])
    w = np.logspace(-4, 6, 20000)
    _, h = sig.freqs(num, den, w)
    lm = np.log(np.abs(h))
    i = np.nonzero(np.diff(np.sign(lm)))[0]
    if len(i) == 0:
        return None
    i = i[0]
    f = -lm[i] / (lm[i + 1] - lm[i])
    return float(np.exp(np.log(w[i]) + f * np.log(w[i + 1] / w[i])))


# --------------------------------------------------------------- one point

def evaluate(case, rate, method, d):
    A, B, Cy, Cm = case["ss"]
    T = 1.0 / rate
    tau = d * T
    n = A.shape[0]
    cd = discretize(case["ctrl"][0], case["ctrl"][1], T, method, case["w0"])
    if cd is None:
        return dict(status="infeasible")
    Ac, Bc, Cc, Dc = sig.tf2ss(*cd)
    nc = Ac.shape[0]
    Phi, G0, G1 = fractional_zoh(A, B, T, tau)

    # closed loop: X = [x; u_{k-1}; xc], input r
    #   u_k = Cc xc + Dc (r - Cm x)
    dc = Dc.item()
    Acl = np.block([
        [Phi - dc * G0 @ Cm, G1, G0 @ Cc],
        [-dc * Cm, np.zeros((1, 1)), Cc],
        [-Bc @ Cm, np.zeros((nc, 1)), Ac],
    ])
    Bcl = np.vstack([G0 * dc, [[dc]], Bc])
    Ccl = np.vstack([
        np.hstack([Cy, np.zeros((1, 1 + nc))]),           # y_k
        np.hstack([-dc * Cm, np.zeros((1, 1)), Cc]),       # u_k
    ])
    Dcl = np.array([[0.0], [dc]])
    rho = np.max(np.abs(np.linalg.eigvals(Acl)))
    if rho >= 1.0:
        return dict(status="unstable", max_pole_radius=rho)

    # horizon from the slowest closed-loop pole
    N = int(np.ceil(np.log(DECAY) / np.log(max(rho, 1e-300)))) if rho > 0 else 1
    N = min(max(N, 50), MAX_SAMPLES)
    t = np.arange(N + 1) * T
    _, yk, X = sig.dlsim((Acl, Bcl, Ccl, Dcl, T), np.ones(N + 1), t)
    uk = yk[:, 1]
    x = X[:, :n]
    uprev = X[:, n]
    # steady state from the fixed point
    Xf = np.linalg.solve(np.eye(Acl.shape[0]) - Acl, Bcl[:, 0])
    yf = (Ccl[0] @ Xf).item()

    # intersample: y(kT + jT/16), u_{k-1} until tau, u_k after (plus the
    # load step dist, constant from t = 0, at the plant input)
    def between(x, uprev, uk, dist):
        ys = np.empty((N + 1, SUB))
        for j in range(SUB):
            s = j * T / SUB
            _, Gfull = hold_int(A, B, s)
            if s <= tau:
                E, Gs = hold_int(A, B, s)
                ys[:, j] = (x @ (Cy @ E).T)[:, 0] + uprev * (Cy @ Gs).item()
            else:
                Et, Gt = hold_int(A, B, tau)
                E2, G2 = hold_int(A, B, s - tau)
                E = E2 @ Et
                ys[:, j] = (x @ (Cy @ E).T)[:, 0] + uprev * (Cy @ E2 @ Gt).item() \
                    + uk * (Cy @ G2).item()
            ys[:, j] += dist * (Cy @ Gfull).item()
        return ys

    ys = between(x, uprev, uk, 0.0)
    tt = (t[:, None] + np.arange(SUB)[None, :] * T / SUB).ravel()
    fig = step_figures(tt, ys.ravel(), yf)

    if case["disturbance"]:
        # load disturbance: a unit step added at the plant input at t = 0,
        # r = 0; over a period it adds (Gamma0 + Gamma1) to the state update
        Bd = np.vstack([G0 + G1, [[0.0]], np.zeros((nc, 1))])
        _, yd, Xd = sig.dlsim((Acl, Bd, Ccl, np.zeros((2, 1)), T), np.ones(N + 1), t)
        yds = between(Xd[:, :n], Xd[:, n], yd[:, 1], 1.0).ravel()
        Xdf = np.linalg.solve(np.eye(Acl.shape[0]) - Acl, Bd[:, 0])
        ydf = (Ccl[0] @ Xdf).item()
        peak = np.max(np.abs(yds))
        out = np.abs(yds - ydf) > BAND * peak
        idx = np.nonzero(out)[0]
        rec = np.nan if out[-1] else (tt[idx[-1] + 1] if len(idx) else 0.0)
        fig.update(disturbance_peak=peak, recovery_time_s=rec)

    # frequency: L = C(z) G(z), G from u_k to y_m,k with the delay state
    Ag = np.block([[Phi, G1], [np.zeros((1, n + 1))]])
    Bg = np.vstack([G0, [[1.0]]])
    Cg = np.hstack([Cm, np.zeros((1, 1))])
    wmin = case["wmin"]
    w = np.logspace(np.log10(wmin), np.log10(np.pi / T), NFREQ)
    _, Hc = sig.dfreqresp((cd[0], cd[1], T), w * T)
    _, Hg = sig.dfreqresp((Ag, Bg, Cg, np.zeros((1, 1)), T), w * T)
    fig.update(margins(w, Hc * Hg))
    fig.update(status="ok", y_final=yf, max_pole_radius=rho,
               horizon_samples=N)
    return fig


# --------------------------------------------------------------------- main

def grid(r):
    if r.get("spacing", "log") == "log":
        return np.geomspace(r["min_hz"], r["max_hz"], r["points"])
    return np.linspace(r["min_hz"], r["max_hz"], r["points"])


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--case", required=True)
    ap.add_argument("--points", type=int, default=60,
                    help="grid points to time, spread over the rate range")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--csv", help="write the per-point figures here")
    ap.add_argument("--no-disturbance", action="store_true",
                    help="skip the load-disturbance run (the earlier, lighter baseline)")
    a = ap.parse_args()
    with open(a.case) as fh:
        c = json.load(fh)
    plant = [np.array(v, float) for v in c["plant"]]
    sensor = [np.array(v, float) for v in c.get("sensor", [[1.0], [1.0]])]
    ctrl = [np.array(v, float) for v in c["controller"]]
    rates = grid(c["rates"])
    methods, delays = c["methods"], c["delays"]
    w0 = 2 * np.pi * c["prewarp_hz"] if c.get("prewarp_hz") else \
        continuous_crossover(plant, sensor, ctrl)
    roots = np.concatenate([_roots(p) for p in (*plant, *sensor, *ctrl)])
    nz = np.abs(roots[np.abs(roots) > 1e-9])
    case = dict(ss=plant_sensor_ss(plant, sensor), ctrl=ctrl, w0=w0,
                disturbance=not a.no_disturbance,
                wmin=0.01 * (nz.min() if len(nz) else 1.0))

    # the sample: one rate from each of N equal slices of the rate grid
    # (so the mix of slow and fast rates matches the full sweep), random
    # method and delay, fixed seed
    rng = np.random.default_rng(a.seed)
    edges = np.linspace(0, len(rates), a.points + 1).astype(int)
    pts = []
    for lo, hi in zip(edges[:-1], edges[1:]):
        i = int(rng.integers(lo, max(hi, lo + 1)))
        pts.append((float(rates[min(i, len(rates) - 1)]),
                    methods[int(rng.integers(len(methods)))],
                    float(delays[int(rng.integers(len(delays)))])))

    rows = []
    t0, c0 = time.perf_counter(), time.process_time()
    for rate, m, d in pts:
        rows.append(dict(rate_hz=rate, method=m, compute_delay=d,
                         **evaluate(case, rate, m, d)))
    el, cpu = time.perf_counter() - t0, time.process_time() - c0
    if a.csv:
        keys = []
        for r in rows:
            keys += [k for k in r if k not in keys]
        with open(a.csv, "w", newline="") as fh:
            wr = csv.DictWriter(fh, keys)
            wr.writeheader()
            wr.writerows(rows)
    st = {}
    for r in rows:
        st[r["status"]] = st.get(r["status"], 0) + 1
    print(f"scipy by hand: {len(pts)} points in {el:.3f} s = "
          f"{len(pts) / el:.2f} points/s, cpu {cpu:.3f} s  ({', '.join(f'{k} {v}' for k, v in sorted(st.items()))})")


if __name__ == "__main__":
    sys.exit(main())
