#!/usr/bin/env python3
"""Reference data for looprate's tests, from SciPy's scipy.signal.

Writes two JSON files next to this script:

  discretize.json  continuous transfer functions discretized by
                   scipy.signal.cont2discrete with six methods;
  loops.json       sampled-data unity-feedback loops: step-response
                   samples (scipy.signal.dlsim) and the loop gain on the
                   unit circle (scipy.signal.dfreqresp).

Every SciPy number is checked against an independent high-precision
computation (mpmath state space, or exact rational arithmetic for the
bilinear-family maps); where SciPy loses digits the entry's tolerance is
loosened and says why. See README.md in this directory.

Usage:
  python3 tests/reference/generate.py          rewrite both JSON files
  python3 tests/reference/generate.py --check  regenerate in memory and
        exit 1 (naming file and entry) if the committed files differ
        beyond 1e-12 relative (SciPy's own numbers: beyond what differs
        between machines, see SCIPY_KEYS).

The transfer functions are our own choices. The only outside reference is
SciPy (version pinned in requirements.txt).
"""

import argparse
import fnmatch
import json
import math
import pathlib
import sys
from fractions import Fraction

HERE = pathlib.Path(__file__).resolve().parent
REQUIREMENTS = HERE / "requirements.txt"
FILES = ("discretize.json", "loops.json")
CHECK_REL = 1e-12
DEFAULT_REL_TOL = 1e-9
MAX_FILE_BYTES = 1_500_000
# loop_freq is compared relative to max(|L(w)|, FREQ_FLOOR * max over the grid
# of |L|): some loops have an exact zero of L at z = -1 (w = pi/T).
FREQ_FLOOR = 1e-3
# Above this scipy_discrepancy, scipy's own coefficients are no usable reference.
SCIPY_UNUSABLE = 1e-3

# ---------------------------------------------------------------------------
# Version pin
# ---------------------------------------------------------------------------


def check_versions():
    """Refuse to run unless the installed packages match requirements.txt."""
    import importlib.metadata as md

    problems = []
    for line in REQUIREMENTS.read_text().splitlines():
        line = line.split("#", 1)[0].strip()
        if not line:
            continue
        name, _, spec = line.partition("==")
        name, spec = name.strip(), spec.strip()
        try:
            have = md.version(name)
        except md.PackageNotFoundError:
            problems.append(f"{name}: not installed (pinned {name}=={spec})")
            continue
        if not fnmatch.fnmatchcase(have, spec):
            problems.append(f"{name}: installed {have}, pinned {name}=={spec}")
    if problems:
        sys.stderr.write(
            "generate.py: installed versions do not match "
            f"{REQUIREMENTS.name}; the reference data is only defined for "
            "the pinned versions:\n"
        )
        for p in problems:
            sys.stderr.write(f"  - {p}\n")
        sys.stderr.write(
            "Install them with: python3 -m pip install -r "
            "tests/reference/requirements.txt\n"
        )
        sys.exit(2)


check_versions()

import mpmath  # noqa: E402
import numpy as np  # noqa: E402
import scipy  # noqa: E402
import scipy.signal as sig  # noqa: E402
from mpmath import mp, mpf, mpc  # noqa: E402

# Our method names -> scipy.signal.cont2discrete method names.
SCIPY_METHOD = {
    "zoh": "zoh",
    "foh": "foh",
    "impulse": "impulse",
    "tustin": "bilinear",
    "forward-euler": "euler",
    "backward-euler": "backward_diff",
}
# Generalized bilinear parameter of the s -> z maps: s = (z-1)/(T(alpha z + 1-alpha)).
GBT_ALPHA = {
    "tustin": Fraction(1, 2),
    "forward-euler": Fraction(0),
    "backward-euler": Fraction(1),
}

# Working precisions (decimal digits) of the high-precision route; the
# result at the lower one must agree with the higher one to HP_AGREE.
HP_DPS = (60, 90)
HP_AGREE = 1e-35
HP_ZERO = 1e-40  # |coefficient| below this times the largest is exactly zero


def poly_expand(*factors):
    """Descending coefficients of a product of descending-coefficient factors."""
    out = np.array([1.0])
    for f in factors:
        out = np.polymul(out, np.asarray(f, dtype=float))
    return [float(x) for x in out]


# ---------------------------------------------------------------------------
# The continuous transfer functions (our own choices)
# ---------------------------------------------------------------------------


def models():
    """(name, description, num, den, periods) for discretize.json."""
    two_pi = 2.0 * math.pi
    wr = two_pi * 1000.0  # 1 kHz resonance
    wb = two_pi * 1000.0  # 1 kHz third-order Butterworth-type filter
    wn50 = two_pi * 50.0  # 50 Hz notch
    m = []

    def add(name, desc, num, den, periods):
        m.append((name, desc, [float(x) for x in num], [float(x) for x in den], periods))

    add("lag1", "first-order lag 1/(s+1)", [1], [1, 1], [1.0, 0.1, 0.01])
    add("lag1_fast", "first-order lag 2000/(s+2000)", [2000], [1, 2000], [1e-3, 1e-4, 5e-6])
    add("lag2_real", "two real poles 1/((s+1)(s+5))", [1], [1, 6, 5], [1.0, 0.1, 0.01])
    add("lead1", "lead 10(s+2)/(s+20), biproper", [10, 20], [1, 20], [0.1, 0.01, 1e-3])
    add(
        "lead_lag2",
        "lead-lag (s+1)(s+10)/((s+0.1)(s+100)), biproper",
        poly_expand([1, 1], [1, 10]),
        poly_expand([1, 0.1], [1, 100]),
        [0.1, 0.01, 1e-3],
    )
    add("pi", "PI controller (2s+5)/s, pole at 0, biproper", [2, 5], [1, 0], [1.0, 0.01, 1e-4])
    add("integrator", "pure integrator 3/s", [3], [1, 0], [1.0, 0.01, 1e-4])
    # PID: Kp + Ki/s + Kd s/(Tf s + 1), Kp=2, Ki=10, Kd=0.1, Tf=0.01; den not monic.
    add(
        "pid_filtered",
        "PID 2 + 10/s + 0.1s/(0.01s+1) over a common denominator (not monic)",
        [2 * 0.01 + 0.1, 2 + 10 * 0.01, 10],
        [0.01, 1, 0],
        [0.1, 1e-3, 1e-5],
    )
    add("double_integrator", "double integrator 1/s^2", [1], [1, 0, 0], [1.0, 0.01, 5e-6])
    add(
        "integrator2_lag",
        "two integrators and a lag 1/(s^2(s+1))",
        [1],
        [1, 1, 0, 0],
        [1.0, 0.01, 1e-4],
    )
    add(
        "motor_position",
        "integrator and lag 1/(s(0.5s+1)), den not monic",
        [1],
        [0.5, 1, 0],
        [1.0, 0.1, 1e-3],
    )
    add(
        "resonance_slow",
        "lightly damped resonance 100/(s^2+0.4s+100), zeta 0.02, wn 10",
        [100],
        [1, 0.4, 100],
        [0.1, 0.01, 1e-3],
    )
    add(
        "resonance_1khz",
        "lightly damped resonance at 1 kHz, zeta 0.02",
        [wr * wr],
        [1, 2 * 0.02 * wr, wr * wr],
        [1e-4, 2e-5, 5e-6],
    )
    add(
        "nonminimum_phase",
        "right-half-plane zero (-s+2)/((s+1)(s+3))",
        [-1, 2],
        [1, 4, 3],
        [1.0, 0.1, 0.01],
    )
    add("allpass_nmp", "all-pass (s-5)/(s+5), biproper", [1, -5], [1, 5], [0.1, 0.01, 1e-3])
    add(
        "unstable1",
        "unstable pole 1/(s-1) (backward-euler at T=1 maps the pole to z=infinity)",
        [1],
        [1, -1],
        [1.0, 0.1, 0.01],
    )
    add(
        "unstable2_zero",
        "unstable pole and a zero (s+2)/((s-3)(s+10))",
        [1, 2],
        [1, 7, -30],
        [0.1, 0.01, 1e-3],
    )
    add(
        "order4",
        "fourth order 18/((s+1)(s+2)(s^2+0.6s+9))",
        [18],
        poly_expand([1, 1], [1, 2], [1, 0.6, 9]),
        [1.0, 0.1, 0.01],
    )
    add(
        "order4_zeros",
        "fourth order with two zeros 40(s+3)(s+0.5)/((s+1)(s+4)(s^2+2s+50))",
        poly_expand([40], [1, 3], [1, 0.5]),
        poly_expand([1, 1], [1, 4], [1, 2, 50]),
        [1.0, 0.05, 1e-3],
    )
    add(
        "butter3_1khz",
        "third-order Butterworth-type low-pass at 1 kHz",
        [1],
        [1 / wb**3, 2 / wb**2, 2 / wb, 1],
        [1e-4, 2e-5, 5e-6],
    )
    add(
        "notch_50hz",
        "notch at 50 Hz (s^2+2*0.01*w s+w^2)/(s^2+2*0.5*w s+w^2), biproper",
        [1, 2 * 0.01 * wn50, wn50 * wn50],
        [1, 2 * 0.5 * wn50, wn50 * wn50],
        [1e-3, 1e-4, 5e-6],
    )
    add(
        "stiff2",
        "stiff lag 1/((1e-5 s+1)(10 s+1))",
        [1],
        poly_expand([1e-5, 1], [10, 1]),
        [1.0, 1e-3, 5e-6],
    )
    add(
        "stiff3_zero",
        "stiff (s+1)/((1e-5 s+1)(1e-2 s+1)(10 s+1))",
        [1, 1],
        poly_expand([1e-5, 1], [1e-2, 1], [10, 1]),
        [1.0, 1e-3, 5e-6],
    )
    add(
        "stiff4",
        "stiff fourth order, time constants 1e-5, 1e-3, 0.1, 10 s",
        [1],
        poly_expand([1e-5, 1], [1e-3, 1], [0.1, 1], [10, 1]),
        [1.0, 1e-3, 5e-6],
    )
    # PID with Ti = 10 s and derivative filter Tf = 1e-5 s: 1 + 1/(10 s) + 1e-3 s/(1e-5 s + 1)
    add(
        "stiff_pid",
        "stiff PID 1 + 0.1/s + 1e-3 s/(1e-5 s+1) (integral 10 s, filter 1e-5 s)",
        [1e-5 + 1e-3, 1 + 0.1 * 1e-5, 0.1],
        [1e-5, 1, 0],
        [1.0, 1e-3, 5e-6],
    )
    add(
        "stiff_integrator_lag",
        "integrator with a fast lag 1/(s(1e-5 s+1))",
        [1],
        [1e-5, 1, 0],
        [1e-2, 1e-4, 5e-6],
    )
    return m


# ---------------------------------------------------------------------------
# Small helpers
# ---------------------------------------------------------------------------


def as_floats(v):
    return [float(x) for x in v]


def strip_leading_exact_zeros(v):
    v = list(v)
    while len(v) > 1 and v[0] == 0:
        v.pop(0)
    return v


def normwise_rel(a, b):
    """max|a-b| / max|b| over equal-length vectors (b the better value)."""
    scale = max(abs(x) for x in b)
    if scale == 0:
        return float(max(abs(x) for x in a))
    return float(max(abs(x - y) for x, y in zip(a, b)) / scale)


def loosened_tol(observed):
    """DEFAULT_REL_TOL, or ten times the observed discrepancy rounded up on a 1-2-5 grid."""
    want = 10.0 * observed
    if want <= DEFAULT_REL_TOL:
        return DEFAULT_REL_TOL
    e = math.floor(math.log10(want))
    for m in (1, 2, 5, 10):
        t = float(f"{m}e{e}")
        if t >= want:
            return t
    raise AssertionError


# ---------------------------------------------------------------------------
# High-precision routes (independent of SciPy's double-precision path)
# ---------------------------------------------------------------------------


def mp_canonical(num, den):
    """Controllable canonical state space of num/den (descending), in mp.

    Returns (A, B, C, D) with A an n x n mp.matrix (or None when n == 0),
    B, C as lists, D an mpf. Coefficients enter exactly (mpf of a float is exact).
    """
    num = [mpf(x) for x in num]
    den = [mpf(x) for x in den]
    while den[0] == 0:
        den.pop(0)
    a0 = den[0]
    den = [d / a0 for d in den]
    num = [b / a0 for b in num]
    n = len(den) - 1
    num = [mpf(0)] * (n + 1 - len(num)) + num
    D = num[0]
    if n == 0:
        return None, [], [], D
    c = [num[i + 1] - D * den[i + 1] for i in range(n)]
    A = mp.matrix(n, n)
    for j in range(n):
        A[0, j] = -den[j + 1]
    for i in range(1, n):
        A[i, i - 1] = 1
    B = [mpf(1)] + [mpf(0)] * (n - 1)
    return A, B, c, D


def mp_ss2tf(Phi, Gam, C, D):
    """SISO state space -> (num, den) descending, den monic, by Faddeev-LeVerrier.

    adj(zI - Phi) = sum_k M_k z^(n-1-k), den = sum_k c_k z^(n-k); the numerator
    C adj(zI-Phi) Gam + D den is formed without subtracting two
    characteristic polynomials.
    """
    n = Phi.rows
    Mk = mp.eye(n)
    den = [mpf(1)]
    cMb = []
    for k in range(1, n + 1):
        cMb.append(sum(C[i] * sum(Mk[i, j] * Gam[j] for j in range(n)) for i in range(n)))
        AM = Phi * Mk
        ck = -sum(AM[i, i] for i in range(n)) / k
        den.append(ck)
        Mk = AM + ck * mp.eye(n)
    num = [D * den[0]] + [D * den[k + 1] + cMb[k] for k in range(n)]
    return num, den


def mp_discretize_ss_route(num, den, T, method):
    """zoh / foh / impulse in mp via matrix exponentials (one augmented expm)."""
    A, B, C, D = mp_canonical(num, den)
    n = A.rows
    T = mpf(T)
    if method == "zoh":
        M = mp.matrix(n + 1, n + 1)
        for i in range(n):
            for j in range(n):
                M[i, j] = A[i, j] * T
            M[i, n] = B[i] * T
        E = mp.expm(M)
        Phi = E[0:n, 0:n]
        Gam = [E[i, n] for i in range(n)]
        Dd = D
    elif method == "foh":
        # Triangle hold: [[A T, B T, 0], [0, 0, 1], [0, 0, 0]]
        M = mp.matrix(n + 2, n + 2)
        for i in range(n):
            for j in range(n):
                M[i, j] = A[i, j] * T
            M[i, n] = B[i] * T
        M[n, n + 1] = 1
        E = mp.expm(M)
        Phi = E[0:n, 0:n]
        G1 = [E[i, n] for i in range(n)]
        G2 = [E[i, n + 1] for i in range(n)]
        PG2 = [sum(Phi[i, j] * G2[j] for j in range(n)) for i in range(n)]
        Gam = [G1[i] - G2[i] + PG2[i] for i in range(n)]
        Dd = D + sum(C[i] * G2[i] for i in range(n))
    elif method == "impulse":
        # T * sum_k h(kT) z^-k for the strictly proper part, plus D.
        Phi = mp.expm(A * T)
        Gam = [sum(Phi[i, j] * B[j] for j in range(n)) * T for i in range(n)]
        Dd = D + sum(C[i] * B[i] for i in range(n)) * T
    else:
        raise ValueError(method)
    return mp_ss2tf(Phi, Gam, C, Dd)


def frac_poly_mul(p, q):
    """Ascending Fraction polynomials."""
    out = [Fraction(0)] * (len(p) + len(q) - 1)
    for i, a in enumerate(p):
        for j, b in enumerate(q):
            out[i + j] += a * b
    return out


def frac_poly_pow(p, k):
    out = [Fraction(1)]
    for _ in range(k):
        out = frac_poly_mul(out, p)
    return out


def exact_gbt(num, den, T, alpha):
    """Exact rational s = (z-1)/(T(alpha z + 1 - alpha)) substitution.

    Returns (num_z, den_z) descending Fractions, den_z[0] == 1, or None when
    the result is not proper (a pole maps to z = infinity).
    """
    num = [Fraction(x) for x in num]
    den = [Fraction(x) for x in den]
    while den[0] == 0:
        den.pop(0)
    n = len(den) - 1
    T = Fraction(T)
    zm1 = [Fraction(-1), Fraction(1)]  # z - 1, ascending
    w = [T * (1 - alpha), T * alpha]  # T (alpha z + 1 - alpha), ascending

    def subst(desc):
        asc = list(reversed(desc))
        total = [Fraction(0)] * (n + 1)
        for i, b in enumerate(asc):
            if b == 0:
                continue
            term = frac_poly_mul(frac_poly_pow(zm1, i), frac_poly_pow(w, n - i))
            for k, t in enumerate(term):
                total[k] += b * t
        return list(reversed(total))  # descending, length n + 1

    nz, dz = subst(num), subst(den)
    if dz[0] == 0:
        return None
    lead = dz[0]
    nz = strip_leading_exact_zeros([x / lead for x in nz])
    dz = [x / lead for x in dz]
    return nz, dz


def hp_discretize(num, den, T, method):
    """High-precision reference: (num_z, den_z) as mpf lists, or None if not proper.

    Also returns a short description of the route.
    """
    if method in GBT_ALPHA:
        r = exact_gbt(num, den, T, GBT_ALPHA[method])
        if r is None:
            return None, "exact rational substitution"
        mp.dps = HP_DPS[-1]
        nz, dz = r
        return ([mpf(x.numerator) / x.denominator for x in nz],
                [mpf(x.numerator) / x.denominator for x in dz]), "exact rational substitution"
    results = []
    for dps in HP_DPS:
        mp.dps = dps
        results.append(mp_discretize_ss_route(num, den, T, method))
    (n1, d1), (n2, d2) = results
    agree = max(normwise_rel(n1, n2), normwise_rel(d1, d2))
    if not agree < HP_AGREE:
        raise RuntimeError(f"mpmath route not converged ({agree:.1e}) for {method} {num}/{den} T={T}")
    route = f"mpmath {HP_DPS[-1]}-digit state space (augmented expm, Faddeev-LeVerrier)"
    return (n2, d2), route


def clean_hp(nz, dz):
    """Normalise an mp result: den monic, leading numerator zeros stripped,
    coefficients below HP_ZERO relative set to exactly zero."""
    lead = dz[0]
    nz = [x / lead for x in nz]
    dz = [x / lead for x in dz]
    sn = max(abs(x) for x in nz)
    sd = max(abs(x) for x in dz)
    nz = [x if abs(x) > HP_ZERO * sn else mpf(0) for x in nz]
    dz = [x if abs(x) > HP_ZERO * sd else mpf(0) for x in dz]
    nz = strip_leading_exact_zeros(nz)
    return nz, dz


# ---------------------------------------------------------------------------
# SciPy route
# ---------------------------------------------------------------------------


def scipy_discretize(num, den, T, method):
    """scipy.signal.cont2discrete on the tf, normalised. Returns (num_z, den_z, note)."""
    sm = SCIPY_METHOD[method]
    nd = np.asarray(den, float)
    nn = np.asarray(num, float)
    note = None
    biproper = len(nn) == len(nd) and nn[0] != 0
    if method == "impulse" and biproper:
        # scipy refuses D != 0 for impulse: discretize the strictly proper part
        # and add D back: C(z) = D + T sum h(kT) z^-k.
        D = nn[0] / nd[0]
        sp = (nn - D * nd)[1:]
        nz, dz, _ = sig.cont2discrete((sp, nd), T, method=sm)
        nz = np.atleast_2d(nz)[0]
        nz = nz / dz[0]
        dz = dz / dz[0]
        nz = np.concatenate([np.zeros(len(dz) - len(nz)), nz]) + D * dz
        note = (
            "scipy's impulse method refuses D != 0: reference is "
            "cont2discrete((num - D*den)[1:], den, T, method='impulse') "
            "plus D*den_z, with D = num[0]/den[0] (our impulse convention "
            "D + T*sum h(kT) z^-k)"
        )
    else:
        nz, dz, _ = sig.cont2discrete((nn, nd), T, method=sm)
        nz = np.atleast_2d(nz)[0]
    lead = dz[0]
    return [float(x) for x in nz / lead], [float(x) for x in dz / lead], note


def align_scipy_num(name, nz_sp, nz_hp):
    """Drop scipy's leading numerator entries where the exact value is zero.

    SciPy's ss2tf returns a numerator as long as the denominator; entries that
    are zero in exact arithmetic come back as exact zeros or rounding noise.
    Returns (stripped, largest dropped magnitude relative to the numerator).
    """
    extra = len(nz_sp) - len(nz_hp)
    if extra < 0:
        raise RuntimeError(f"{name}: scipy numerator shorter than the exact one")
    scale = max(abs(x) for x in nz_hp)
    dropped = nz_sp[:extra]
    worst = max((abs(x) / float(scale) for x in dropped), default=0.0)
    if worst > 1.0:
        raise RuntimeError(f"{name}: scipy leading numerator {dropped} is not ~0")
    return nz_sp[extra:], worst


# ---------------------------------------------------------------------------
# discretize.json
# ---------------------------------------------------------------------------


def check_dc_gain(tag, num, den, method, nz, dz):
    """Invariant of the high-precision result: every method except impulse
    keeps the gain at s = 0 as the gain at z = 1 (and a pole at s = 0 as a
    pole at z = 1)."""
    if method == "impulse":
        return
    mp.dps = HP_DPS[-1]
    n0, d0 = mpf(num[-1]), mpf(den[-1])
    n1, d1 = sum(nz), sum(dz)
    scale = max(abs(x) for x in dz)
    if d0 == 0:
        ok = abs(d1) < 1e-30 * scale
    else:
        ok = abs(n1 / d1 - n0 / d0) <= 1e-25 * abs(n0 / d0)
    if not ok:
        raise RuntimeError(f"{tag}: high-precision result fails the DC-gain check")


def build_discretize():
    entries = []
    skipped = []
    src_ver = f"scipy {scipy.__version__}"
    for name, desc, num, den, periods in models():
        for T in periods:
            for method in SCIPY_METHOD:
                sm = SCIPY_METHOD[method]
                tag = f"{name} T={T!r} {method}"
                hp, route = hp_discretize(num, den, T, method)
                try:
                    nz_sp, dz_sp, note = scipy_discretize(num, den, T, method)
                    sp_error = None
                except Exception as exc:  # scipy refuses
                    sp_error = f"{type(exc).__name__}: {exc}"
                if sp_error is not None or hp is None:
                    if sp_error is None or hp is not None:
                        raise RuntimeError(f"{tag}: scipy and the exact route disagree on refusal")
                    skipped.append({
                        "name": name,
                        "num": num,
                        "den": den,
                        "period_s": T,
                        "method": method,
                        "reason": (
                            f"scipy.signal.cont2discrete(method='{sm}') raises "
                            f"{sp_error}; exact substitution confirms the "
                            "result is not proper (a pole maps to z = infinity)"
                        ),
                    })
                    continue
                check_dc_gain(tag, num, den, method, *hp)
                nz_hp, dz_hp = clean_hp(*hp)
                if len(dz_sp) != len(dz_hp):
                    raise RuntimeError(f"{tag}: denominator lengths differ")
                nz_sp, dropped = align_scipy_num(tag, nz_sp, nz_hp)
                disc = max(normwise_rel(nz_sp, nz_hp), normwise_rel(dz_sp, dz_hp), dropped)
                tol = loosened_tol(disc)
                tol_reason = None
                if tol != DEFAULT_REL_TOL:
                    tol_reason = (
                        "scipy's tf path (tf2ss, the state-space map, then "
                        "ss2tf, which builds den = poly(Ad) and num = "
                        "poly(Ad - Bd Cd) + (Dd - 1) den from eigenvalues) "
                        "loses digits on this model/period: the discrete poles "
                        "crowd near z = 1 and the numerator is a small "
                        "difference of two monic polynomials; the result "
                        "differs from the high-precision route "
                        f"({route}) by scipy_discrepancy; rel_tol is ten "
                        "times that, rounded up on a 1-2-5 grid"
                    )
                    if disc > SCIPY_UNUSABLE:
                        tol_reason += (
                            ". SciPy's coefficients are not a usable reference "
                            "here: compare with num_z_hp/den_z_hp instead"
                        )
                source = (
                    f"scipy.signal.cont2discrete((num, den), period_s, method='{sm}') "
                    f"[{src_ver}]"
                )
                if note is not None:
                    source = (
                        f"scipy.signal.cont2discrete((num - D*den, den), period_s, "
                        f"method='{sm}') plus D [{src_ver}]"
                    )
                entries.append({
                    "name": name,
                    "description": desc,
                    "model_source": "our own choice",
                    "num": num,
                    "den": den,
                    "period_s": T,
                    "method": method,
                    "scipy_method": sm,
                    "source": source,
                    "note": note,
                    "num_z": nz_sp,
                    "den_z": dz_sp,
                    "rel_tol": tol,
                    "tol_reason": tol_reason,
                    "num_z_hp": [float(x) for x in nz_hp],
                    "den_z_hp": [float(x) for x in dz_hp],
                    "hp_route": route,
                    "scipy_discrepancy": disc,
                })
    # Recorded quirk: a static gain is not discretized by scipy as a gain.
    nz, dz, _ = sig.cont2discrete(([5.0], [1.0]), 0.1, method="zoh")
    skipped.append({
        "name": "static_gain",
        "num": [5.0],
        "den": [1.0],
        "period_s": 0.1,
        "method": "all",
        "reason": (
            "a static gain has no state; scipy.signal.tf2ss returns a dummy "
            "one-state model (A=0, B=0, C=0) and cont2discrete then gives "
            f"num {as_floats(np.atleast_2d(nz)[0])} / den {as_floats(dz)}, "
            "an uncancelled pole-zero pair at z = 1 instead of the gain 5; "
            "the exact answer for every method is the gain itself"
        ),
    })
    return {
        "schema": "looprate discretize reference v1",
        "generator": "tests/reference/generate.py",
        "scipy_version": scipy.__version__,
        "numpy_version": np.__version__,
        "mpmath_version": mpmath.__version__,
        "default_rel_tol": DEFAULT_REL_TOL,
        "tolerance_rule": (
            "compare num_z and den_z separately: max_i |ours_i - ref_i| <= "
            "rel_tol * max_i |ref_i| (norm-wise relative), after stripping "
            "leading exact zeros of our numerator and normalising den_z[0] = 1"
        ),
        "method_names": {k: v for k, v in SCIPY_METHOD.items()},
        "entries": entries,
        "skipped": skipped,
    }


# ---------------------------------------------------------------------------
# loops.json
# ---------------------------------------------------------------------------


def loop_cases():
    """Our own loops: (name, description, P, C, T, d, controller method)."""
    P1 = ([1.0], [1.0, 1.0, 0.0])
    C1 = ([1.0], [1.0])
    C1d = ([0.5], [1.0])  # gain 1 with a one-sample delay is unstable (|z| = 1.056)
    P2 = ([2.0], poly_expand([0.01, 1], [0.1, 1]))
    C2 = ([1.5, 40.0], [1.0, 0.0])
    # 10/(s(s+1)) with a resonance at 100 rad/s, zeta 0.02, well above crossover
    P3 = ([10.0 * 100.0**2], poly_expand([1, 1, 0], [1, 2 * 0.02 * 100.0, 100.0**2]))
    C3 = ([0.5, 1.0], [0.05, 1.0])  # lead (0.5s + 1)/(0.05s + 1)
    P4 = ([1.0], [1.0, 0.0, -4.0])
    Kp, Kd, Tf = 20.0, 3.0, 0.01
    C4 = ([Kp * Tf + Kd, Kp], [Tf, 1.0])
    P5 = ([18.0], poly_expand([1, 1], [1, 2], [1, 0.6, 9]))
    C5 = (poly_expand([0.5], [1, 0.5]), poly_expand([1, 0], [0.1, 1]))  # 0.5(s+0.5)/(s(0.1s+1))
    P6 = ([1.0], poly_expand([1e-4, 1], [0.5, 1]))
    C6 = ([5.0, 20.0], [1.0, 0.0])
    return [
        ("integrator_lag_unit_gain", "P = 1/(s(s+1)), C = 1, T = 1 s (the classic hand-calculation loop)", P1, C1, 1.0, 0, "zoh"),
        ("integrator_lag_half_gain_delay", "P = 1/(s(s+1)), C = 0.5, T = 1 s, one sample of computation delay (gain 1 would be unstable)", P1, C1d, 1.0, 1, "zoh"),
        ("motor_pi", "motor-like 2/((0.01s+1)(0.1s+1)) with PI (1.5s+40)/s, 1 kHz", P2, C2, 1e-3, 0, "tustin"),
        ("motor_pi_delay", "motor_pi with one sample of computation delay, 1 kHz", P2, C2, 1e-3, 1, "tustin"),
        ("resonance_lead", "10/(s(s+1)) times a resonance 1e4/(s^2+4s+1e4) (zeta 0.02, 100 rad/s) with lead (0.5s+1)/(0.05s+1), 100 Hz", P3, C3, 1e-2, 0, "zoh"),
        ("unstable_pd", "unstable 1/(s^2-4) stabilised by PD with filter 20 + 3s/(0.01s+1), 200 Hz", P4, C4, 5e-3, 0, "tustin"),
        ("unstable_pd_delay", "unstable_pd with one sample of computation delay, 500 Hz", P4, C4, 2e-3, 1, "tustin"),
        ("order4_pi_lag", "4th-order 18/((s+1)(s+2)(s^2+0.6s+9)) with 0.5(s+0.5)/(s(0.1s+1)), 20 Hz (benchmark shape)", P5, C5, 0.05, 0, "tustin"),
        ("order4_pi_lag_zoh", "order4_pi_lag with the controller discretized by zoh", P5, C5, 0.05, 0, "zoh"),
        ("order4_pi_lag_delay", "order4_pi_lag with one sample of computation delay", P5, C5, 0.05, 1, "tustin"),
        ("stiff_pi", "stiff plant 1/((1e-4s+1)(0.5s+1)) with PI (5s+20)/s, 10 kHz", P6, C6, 1e-4, 0, "tustin"),
    ]


def np_ss(num, den):
    """scipy.signal.tf2ss, but a static gain gets zero states (see skipped list)."""
    if len(den) == 1:
        return (np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)),
                np.array([[num[0] / den[0]]]))
    return sig.tf2ss(num, den)


def scipy_loop(P, C, T, d, cmethod):
    """Closed loop from scipy state-space pieces; returns dict of arrays."""
    Ap, Bp, Cp, Dp, _ = sig.cont2discrete(sig.tf2ss(*P), T, method="zoh")
    if not np.all(Dp == 0):
        raise ValueError("plants here are strictly proper")
    Ac_, Bc_, Cc_, Dc_ = np_ss(*C)
    if Ac_.shape[0] == 0:
        Ac, Bc, Cc, Dc = Ac_, Bc_, Cc_, Dc_
    else:
        Ac, Bc, Cc, Dc, _ = sig.cont2discrete((Ac_, Bc_, Cc_, Dc_), T, method=SCIPY_METHOD[cmethod])
    n_p, n_c = Ap.shape[0], Ac.shape[0]
    # States x = [xp; w (if d = 1); xc]; e = r - y, y = Cp xp, u = Cc xc + Dc e.
    n = n_p + d + n_c
    A = np.zeros((n, n))
    B = np.zeros((n, 1))
    ip, iw, ic = slice(0, n_p), slice(n_p, n_p + d), slice(n_p + d, n)
    # controller
    A[ic, ip] = -Bc @ Cp
    A[ic, ic] = Ac
    B[ic] = Bc
    if d == 0:
        A[ip, ip] = Ap - Bp @ Dc @ Cp
        A[ip, ic] = Bp @ Cc
        B[ip] = Bp @ Dc
    else:
        A[ip, ip] = Ap
        A[ip, iw] = Bp
        A[iw, ip] = -Dc @ Cp
        A[iw, ic] = Cc
        B[iw] = Dc
    Ccl = np.zeros((1, n))
    Ccl[:, ip] = Cp
    Dcl = np.zeros((1, 1))
    _, y, _ = sig.dlsim((A, B, Ccl, Dcl, T), np.ones(61))
    poles = np.linalg.eigvals(A)
    return np.ravel(y), float(max(abs(poles))) if n else 0.0


def scipy_tf_discrete(num, den, T, method):
    """Normalised scipy discrete tf; leading numerator entries that are zero in
    exact arithmetic (per the high-precision route) are dropped."""
    if len(den) == 1:
        return [num[0] / den[0]], [1.0]
    nz, dz, _ = scipy_discretize(num, den, T, method)
    hp, _ = hp_discretize(num, den, T, method)
    nz_hp, _ = clean_hp(*hp)
    nz, _ = align_scipy_num(f"{num}/{den} T={T} {method}", nz, nz_hp)
    return nz, dz


def loop_freqs(T):
    wn = math.pi / T
    w = np.logspace(math.log10(wn) - 4.0, math.log10(wn), 40)
    w[-1] = wn
    return [float(x) for x in w]


def mp_polyval(c, z):
    acc = mpc(0)
    for x in c:
        acc = acc * z + x
    return acc


def hp_loop(P, C, T, d, cmethod, w):
    """High-precision step samples and loop gain."""
    mp.dps = HP_DPS[-1]
    gp = hp_discretize(P[0], P[1], T, "zoh")[0]
    if len(C[1]) == 1:
        gc = ([mpf(C[0][0]) / mpf(C[1][0])], [mpf(1)])
    else:
        gc = hp_discretize(C[0], C[1], T, cmethod)[0]
    mp.dps = HP_DPS[-1]
    gp_num, gp_den = gp
    if d:
        gp_den = list(gp_den) + [mpf(0)]  # extra z^-1
    # Loop gain on the unit circle.
    L = []
    for wk in w:
        z = mpmath.exp(mpc(0, mpf(wk) * mpf(T)))
        L.append(mp_polyval(gc[0], z) / mp_polyval(gc[1], z) * mp_polyval(gp_num, z) / mp_polyval(gp_den, z))
    # Closed loop r -> y by recursion on the closed-loop difference equation:
    # T(z) = Nc Np / (Dc Dp + Nc Np); simulate via canonical state space.
    def padd(a, b):
        n = max(len(a), len(b))
        a = [mpf(0)] * (n - len(a)) + list(a)
        b = [mpf(0)] * (n - len(b)) + list(b)
        return [x + y for x, y in zip(a, b)]

    def pmul(a, b):
        out = [mpf(0)] * (len(a) + len(b) - 1)
        for i, x in enumerate(a):
            for j, y in enumerate(b):
                out[i + j] += x * y
        return out

    nn = pmul(gc[0], gp_num)
    dd = padd(pmul(gc[1], gp_den), nn)
    A, B, Cv, D = mp_canonical(nn, dd)
    n = A.rows
    x = [mpf(0)] * n
    y = []
    for _ in range(61):
        y.append(sum(Cv[i] * x[i] for i in range(n)) + D)
        x = [sum(A[i, j] * x[j] for j in range(n)) + B[i] for i in range(n)]
    return y, L


def build_loops():
    out = []
    for name, desc, P, C, T, d, cmethod in loop_cases():
        y, pmax = scipy_loop(P, C, T, d, cmethod)
        if not pmax < 1.0:
            raise RuntimeError(f"{name}: closed loop unstable (max |pole| {pmax})")
        w = loop_freqs(T)
        wT = np.asarray(w) * T
        cz = scipy_tf_discrete(C[0], C[1], T, cmethod)
        gz = scipy_tf_discrete(P[0], P[1], T, "zoh")
        gz_den_delay = gz[1] + [0.0] * d
        _, hc = sig.dfreqresp((cz[0], cz[1], T), w=wT)
        _, hg = sig.dfreqresp((gz[0], gz_den_delay, T), w=wT)
        Lsp = hc * hg
        y_hp, L_hp = hp_loop(P, C, T, d, cmethod, w)
        step_disc = normwise_rel([mpf(float(v)) for v in y], y_hp)
        floor = FREQ_FLOOR * max(abs(b) for b in L_hp)
        freq_disc = max(float(abs(mpc(complex(a)) - b) / max(abs(b), floor)) for a, b in zip(Lsp, L_hp))
        step_tol = loosened_tol(step_disc)
        freq_tol = loosened_tol(freq_disc)
        tol_reason = None
        if step_tol != DEFAULT_REL_TOL or freq_tol != DEFAULT_REL_TOL:
            tol_reason = (
                "scipy's result differs from the high-precision route by "
                "step_discrepancy / freq_discrepancy (the discrete plant and "
                "controller transfer functions come through scipy's tf2ss/ss2tf "
                "path); the tolerance is ten times that, rounded up"
            )
        static_c = len(C[1]) == 1
        out.append({
            "name": name,
            "description": desc,
            "model_source": "our own choice",
            "plant": {"num": P[0], "den": P[1]},
            "controller": {"num": C[0], "den": C[1]},
            "feedback": "unity",
            "period_s": T,
            "delay_samples": d,
            "plant_method": "zoh",
            "controller_method": cmethod,
            "plant_z": {"num": gz[0], "den": gz[1]},
            "controller_z": {"num": cz[0], "den": cz[1]},
            "closed_loop_route": (
                "state space: plant tf2ss + cont2discrete(zoh), controller "
                + ("a static gain (no states)" if static_c else
                   f"tf2ss + cont2discrete({SCIPY_METHOD[cmethod]})")
                + ("; one delay state w_{k+1} = u_k feeds the plant" if d else "")
                + "; e_k = r_k - y_k, closed with block matrices; "
                "scipy.signal.dlsim with r_k = 1, x_0 = 0"
            ),
            "freq_route": (
                "scipy.signal.dfreqresp of controller_z times dfreqresp of plant_z"
                + (" with den*z (one sample delay)" if d else "")
                + " at w*period_s rad/sample"
            ),
            "source": f"scipy.signal.cont2discrete, dlsim, dfreqresp [scipy {scipy.__version__}]",
            "closed_loop_max_abs_pole": pmax,
            "step_y": [float(v) for v in y],
            "loop_freq": [[wk, float(h.real), float(h.imag)] for wk, h in zip(w, Lsp)],
            "step_rel_tol": step_tol,
            "freq_rel_tol": freq_tol,
            "tol_reason": tol_reason,
            "step_discrepancy": step_disc,
            "freq_discrepancy": freq_disc,
        })
    return {
        "schema": "looprate loops reference v1",
        "generator": "tests/reference/generate.py",
        "scipy_version": scipy.__version__,
        "numpy_version": np.__version__,
        "mpmath_version": mpmath.__version__,
        "default_rel_tol": DEFAULT_REL_TOL,
        "tolerance_rule": (
            "step_y: max_k |ours_k - ref_k| <= step_rel_tol * max_k |ref_k|; "
            "loop_freq: |L_ours(w) - L_ref(w)| <= freq_rel_tol * max(|L_ref(w)|, "
            f"{FREQ_FLOOR:g} * max over the 40 w of |L_ref|) at each w (the floor "
            "covers loops whose L is exactly 0 at w = pi/T)"
        ),
        "loops": out,
    }


# ---------------------------------------------------------------------------
# Closed-form sanity checks of both routes (run every time)
# ---------------------------------------------------------------------------


def self_test():
    def close(a, b, tol=1e-13):
        assert len(a) == len(b), (a, b)
        assert normwise_rel([mpf(x) for x in a], [mpf(x) for x in b]) < tol, (a, b)

    T, a = 0.1, 3.0
    e = math.exp(-a * T)
    # zoh of a/(s+a) = (1-e^{-aT})/(z - e^{-aT})
    (nz, dz), _ = hp_discretize([a], [1, a], T, "zoh")
    close(clean_hp(nz, dz)[0], [1 - e])
    nz, dz, _ = scipy_discretize([a], [1, a], T, "zoh")
    close(nz[1:], [1 - e]); close(dz, [1, -e])
    # impulse of 1/(s+a) = T z/(z - e^{-aT})
    (nz, dz), _ = hp_discretize([1], [1, a], T, "impulse")
    close(clean_hp(nz, dz)[0], [T, 0]); close(clean_hp(nz, dz)[1], [1, -e])
    # foh of 1/s = (T/2)(z+1)/(z-1)
    (nz, dz), _ = hp_discretize([1], [1, 0], T, "foh")
    close(clean_hp(nz, dz)[0], [T / 2, T / 2]); close(clean_hp(nz, dz)[1], [1, -1])
    # foh (triangle hold) of a/(s+a):
    # ((aT - 1 + e) z + (1 - e - aT e)) / (aT (z - e)), e = e^{-aT}
    (nz, dz), _ = hp_discretize([a], [1, a], T, "foh")
    nz, dz = clean_hp(nz, dz)
    close(nz, [(a * T - 1 + e) / (a * T), (1 - e - a * T * e) / (a * T)]); close(dz, [1, -e])
    nz, dz, _ = scipy_discretize([a], [1, a], T, "foh")
    close(nz, [(a * T - 1 + e) / (a * T), (1 - e - a * T * e) / (a * T)], 1e-12)
    # zoh of 1/s^2 = (T^2/2)(z+1)/(z-1)^2
    (nz, dz), _ = hp_discretize([1], [1, 0, 0], T, "zoh")
    close(clean_hp(nz, dz)[0], [T * T / 2, T * T / 2]); close(clean_hp(nz, dz)[1], [1, -2, 1])
    # tustin of 1/s = (T/2)(z+1)/(z-1)
    (nz, dz), _ = hp_discretize([1], [1, 0], T, "tustin")
    close(nz, [T / 2, T / 2]); close(dz, [1, -1])
    # classic loop: zoh of 1/(s(s+1)) at T=1 is (e^-1 z + 1 - 2e^-1)/((z-1)(z-e^-1))
    e1 = math.exp(-1.0)
    (nz, dz), _ = hp_discretize([1], [1, 1, 0], 1.0, "zoh")
    nz, dz = clean_hp(nz, dz)
    close(nz, [e1, 1 - 2 * e1]); close(dz, [1, -(1 + e1), e1])


# ---------------------------------------------------------------------------
# Writing and checking
# ---------------------------------------------------------------------------


def dumps(obj):
    return json.dumps(obj, sort_keys=True, indent=1, allow_nan=False) + "\n"


# Keys holding diagnostics (differences of rounding errors) that are not
# compared by --check: they legitimately vary between machines.
DIAGNOSTIC_KEYS = {"scipy_discrepancy", "step_discrepancy", "freq_discrepancy"}

# Numbers computed by SciPy's double-precision path. Their last digits
# differ between machines with the same pinned versions (numpy's and
# OpenBLAS's kernels are chosen by CPU: on an AVX-512 machine zoh
# coefficients moved by 1.4e-11 relative against the committed files), so
# --check compares them at PLATFORM_REL, or at half the entry's own
# tolerance where that was loosened. The high-precision values and the
# inputs are compared at CHECK_REL.
SCIPY_KEYS = {"num_z", "den_z", "step_y", "loop_freq", "plant_z", "controller_z",
              "closed_loop_max_abs_pole"}
PLATFORM_REL = 1e-10

# An entry's tolerances come from the observed SciPy discrepancy rounded up
# on a 1-2-5 grid, so they move with that rounding: --check accepts a
# shift of up to a factor TOL_SHIFT either way (and then does not compare
# the tol_reason text, which follows the same discrepancy).
TOL_KEYS = ("rel_tol", "step_rel_tol", "freq_rel_tol")
TOL_SHIFT = 10.0


def is_num(x):
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def compare(path, new, old, tol, problems):
    if isinstance(new, dict) and isinstance(old, dict):
        if set(new) != set(old):
            problems.append(f"{path}: keys differ: added {sorted(set(new) - set(old))}, removed {sorted(set(old) - set(new))}")
        tols = [d[k] for d in (new, old) for k in TOL_KEYS if is_num(d.get(k))]
        loose = max([PLATFORM_REL, tol] + [t / 2 for t in tols])
        tol_moved = any(new.get(k) != old.get(k) for k in TOL_KEYS)
        for k in sorted(set(new) & set(old)):
            if k in DIAGNOSTIC_KEYS:
                continue
            sub = f"{path}.{k}"
            if k in TOL_KEYS and is_num(new[k]) and is_num(old[k]):
                ratio = new[k] / old[k] if old[k] else math.inf
                # (1e-9: 5e-6 / 5e-7 is 10 plus a rounding error.)
                if not (1 / TOL_SHIFT / (1 + 1e-9) <= ratio <= TOL_SHIFT * (1 + 1e-9)):
                    problems.append(f"{sub}: {old[k]!r} -> {new[k]!r} (more than a factor {TOL_SHIFT:g})")
            elif k == "tol_reason" and tol_moved:
                continue
            elif k == "loop_freq":
                compare_loop_freq(sub, new[k], old[k], loose, problems)
            elif k in SCIPY_KEYS:
                compare(sub, new[k], old[k], loose, problems)
            else:
                compare(sub, new[k], old[k], tol, problems)
    elif isinstance(new, list) and isinstance(old, list):
        if len(new) != len(old):
            problems.append(f"{path}: length {len(old)} -> {len(new)}")
            return
        if new and all(is_num(x) for x in new) and all(is_num(x) for x in old):
            scale = max(abs(x) for x in old)
            diff = max(abs(a - b) for a, b in zip(new, old))
            if diff > tol * scale:
                problems.append(f"{path}: differs by {diff:.3e} (scale {scale:.3e}, tolerance {tol:g} relative)")
            return
        for i, (a, b) in enumerate(zip(new, old)):
            label = a.get("name") if isinstance(a, dict) else None
            if isinstance(a, dict) and "period_s" in a and "method" in a:
                label = f"{a['name']} T={a['period_s']!r} {a['method']}"
            compare(f"{path}[{i}]" + (f"({label})" if label else ""), a, b, tol, problems)
    elif is_num(new) and is_num(old):
        if abs(new - old) > tol * max(abs(new), abs(old)):
            problems.append(f"{path}: {old!r} -> {new!r}")
    elif new != old:
        problems.append(f"{path}: {old!r} -> {new!r}")


def compare_loop_freq(path, new, old, tol, problems):
    if len(new) != len(old):
        problems.append(f"{path}: length {len(old)} -> {len(new)}")
        return
    # Relative to |L|, floored as the tests floor it (FREQ_FLOOR times the
    # grid's largest |L|): where L passes near an exact zero (z = -1) its
    # few surviving digits are rounding, and differ between machines.
    peak = max((math.hypot(r, i) for _, r, i in old), default=0.0)
    for i, ((w1, r1, i1), (w0, r0, i0)) in enumerate(zip(new, old)):
        if abs(w1 - w0) > CHECK_REL * abs(w0):
            problems.append(f"{path}[{i}]: w {w0!r} -> {w1!r}")
        mag = max(math.hypot(r0, i0), FREQ_FLOOR * peak)
        if math.hypot(r1 - r0, i1 - i0) > tol * mag:
            problems.append(f"{path}[{i}]: L {complex(r0, i0)} -> {complex(r1, i1)}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--check", action="store_true",
                    help="regenerate in memory and compare with the committed files")
    args = ap.parse_args()
    self_test()
    data = {"discretize.json": build_discretize(), "loops.json": build_loops()}
    failed = False
    for fname in FILES:
        text = dumps(data[fname])
        if len(text.encode()) > MAX_FILE_BYTES:
            sys.stderr.write(f"{fname}: {len(text)} bytes exceeds {MAX_FILE_BYTES}\n")
            sys.exit(1)
        path = HERE / fname
        if args.check:
            if not path.exists():
                print(f"{fname}: missing")
                failed = True
                continue
            old = json.loads(path.read_text())
            problems = []
            compare(fname, data[fname], old, CHECK_REL, problems)
            if problems:
                failed = True
                print(f"{fname}: {len(problems)} difference(s) beyond tolerance:")
                for p in problems[:50]:
                    print(f"  {p}")
                if len(problems) > 50:
                    print(f"  ... and {len(problems) - 50} more")
            else:
                print(f"{fname}: up to date")
        else:
            path.write_text(text)
            d = data[fname]
            n = len(d.get("entries", d.get("loops", [])))
            print(f"wrote {path.relative_to(HERE.parent.parent)}: {n} entries, {len(text)} bytes")
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    main()
