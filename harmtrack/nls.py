"""Exact nonlinear least-squares (NLS) fit of the harmonic model to one frame.

Model of a frame ``x[n]``, ``n = 0 .. N-1``, with the time origin at the frame centre
``t_n = n - (N - 1) / 2``:

.. math::

    x[n] = a_0 + \\sum_{k=1}^{L} \\big(a_k \\cos(k\\omega t_n) + b_k \\sin(k\\omega t_n)\\big) + e[n]

With a centred origin the cosine and sine columns are orthogonal to each other,
so the Gram matrix splits into a cosine block ``C`` (``k, l = 0..L``) and a sine
block ``S`` (``k, l = 1..L``) with closed-form entries built from the Dirichlet
kernel ``D(theta) = sin(N theta / 2) / sin(theta / 2)``:
``C_kl = (D((k-l)w) + D((k+l)w)) / 2`` and ``S_kl = (D((k-l)w) - D((k+l)w)) / 2``.
The projections ``sum x cos(k w t)`` and ``sum x sin(k w t)`` for all ``k`` come
from one interleaved Goertzel pass.  A Cholesky factor of each block, applied to
the projections, gives the explained energy of *every* order at once (nested
least squares); the f0 is refined to the maximiser of the explained energy of a
fixed order by three-point parabolic interpolation, which at a high SNR is the
maximum-likelihood estimate, whose variance reaches the Cramér-Rao bound.

At the refined f0 every order of the band is fitted over a whole number of
periods, where the Gram blocks are diagonal up to the rounding of the length to
whole samples: two Jacobi sweeps solve them, and the model order follows from
the MAP rule

.. math::

    \\hat L = \\arg\\min_L \\; \\frac{N}{2}\\ln \\hat\\sigma^2_L + L \\ln N + \\tfrac{3}{2}\\ln N

with each harmonic then kept only where its own likelihood gain exceeds its
penalty (absent harmonics get amplitude 0).

References
----------
M. G. Christensen and A. Jakobsson, *Multi-Pitch Estimation*, Morgan & Claypool,
2009 (NLS estimator, MAP order selection, Cramér-Rao bound).
J. K. Nielsen, T. L. Jensen, J. R. Jensen, M. G. Christensen and S. H. Jensen,
"Fast fundamental frequency estimation: making a statistically efficient
estimator computationally efficient", Signal Processing 135, 188-197, 2017
(nested solution for all model orders).
G. Goertzel, "An algorithm for the evaluation of finite trigonometric series",
Amer. Math. Monthly 65(1), 1958.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

#: Floating-point licences of the hot kernels: no NaN or infinity, no signed
#: zero (so min/max vectorise), but no reassociation, no fused multiply-add and
#: no approximate division: those would let results depend on how a kernel was
#: inlined into its caller, so two processes (or a fresh compilation and a
#: cached one) could disagree in the last bit and, rarely, in a decision.
_FASTMATH = {"nnan", "ninf", "nsz"}

#: Smallest model order used while refining f0 (fewer where the band holds fewer
#: harmonics).  Harmonics too weak to pass the order test one by one still carry
#: information about f0 together; a harmonic that is absent costs a little
#: variance and no bias.
MIN_REFINE_ORDER = 8

#: Largest model order used while refining f0.  The harmonics above it add
#: little precision (a few per cent of the Fisher information for a voice's
#: falling spectrum) at a cost linear in the order; the order selection and the
#: amplitudes still use every harmonic in the band.
MAX_REFINE_ORDER = 10

__all__ = ["projections", "refine_f0", "select_order", "analyse_frame",
           "analyse_frames", "crlb_f0"]


@njit(cache=True, nogil=True, fastmath=_FASTMATH)
def _centred_dtft(x, omegas, orders, re_out, im_out):
    """``sum_n x[n] exp(-i k w_m t_n)`` for ``k = 1..orders[m]`` of every ``w_m``.

    ``t`` is centred on the frame.  Lane ``j`` runs through the harmonics of
    ``omegas[0]``, then of ``omegas[1]``... Goertzel recursions for all lanes run
    interleaved in one pass over the samples, two samples per step; the
    per-lane cosines and phase factors come from complex rotations, two sines
    and cosines per frequency.
    """
    N = x.shape[0]
    J = re_out.shape[0]
    coef = np.empty(J)
    rot_r = np.empty(J)   # cos(k w)
    rot_i = np.empty(J)   # sin(k w)
    ph_r = np.empty(J)    # cos(-k w (N-1)/2)
    ph_i = np.empty(J)    # sin(-k w (N-1)/2)
    j = 0
    for m in range(omegas.shape[0]):
        w = omegas[m]
        c1 = math.cos(w)
        s1 = math.sin(w)
        h = -0.5 * w * (N - 1)
        p1r = math.cos(h)
        p1i = math.sin(h)
        cr, ci, pr, pi = c1, s1, p1r, p1i
        for _ in range(orders[m]):
            rot_r[j] = cr
            rot_i[j] = ci
            ph_r[j] = pr
            ph_i[j] = pi
            coef[j] = 2.0 * cr
            cr, ci = cr * c1 - ci * s1, cr * s1 + ci * c1
            pr, pi = pr * p1r - pi * p1i, pr * p1i + pi * p1r
            j += 1
    a = np.zeros(J)  # s[n-1]
    b = np.zeros(J)  # s[n-2]
    n0 = N % 2
    if n0 == 1:
        x0 = x[0]
        for j in range(J):
            a[j] = x0
    for n in range(n0, N, 2):
        x0 = x[n]
        x1 = x[n + 1]
        for j in range(J):
            t0 = x0 + coef[j] * a[j] - b[j]
            t1 = x1 + coef[j] * t0 - a[j]
            b[j] = t0
            a[j] = t1
    # X(th) = sum x[n] e^{-i th n} = e^{-i th (N-1)} (a - e^{-i th} b); the centred
    # sum is e^{i th (N-1)/2} X(th) = e^{-i th (N-1)/2} (a - e^{-i th} b).
    for j in range(J):
        re = a[j] - rot_r[j] * b[j]
        im = rot_i[j] * b[j]
        re_out[j] = re * ph_r[j] - im * ph_i[j]
        im_out[j] = re * ph_i[j] + im * ph_r[j]


@njit(cache=True, nogil=True)
def projections(x, omega, L, c, s):
    """``c[k] = sum x cos(k w t)``, ``s[k] = sum x sin(k w t)`` for ``k = 0..L``.

    ``t`` is centred on the frame (see :func:`_centred_dtft`).
    """
    tot = 0.0
    for n in range(x.shape[0]):
        tot += x[n]
    c[0] = tot
    s[0] = 0.0
    if L == 0:
        return
    re = np.empty(L)
    im = np.empty(L)
    _centred_dtft(x, np.array([omega]), np.array([L]), re, im)
    for k in range(L):
        c[k + 1] = re[k]
        s[k + 1] = -im[k]


@njit(cache=True, nogil=True)
def _multi_projections(x, omegas, orders, C, S):
    """Projections at several frequencies in one pass: row ``m`` of ``C`` / ``S``
    holds ``k = 0..orders[m]`` at ``omegas[m]``."""
    M = omegas.shape[0]
    tot = 0.0
    for n in range(x.shape[0]):
        tot += x[n]
    J = 0
    for m in range(M):
        J += orders[m]
    re = np.empty(J)
    im = np.empty(J)
    _centred_dtft(x, omegas, orders, re, im)
    j = 0
    for m in range(M):
        C[m, 0] = tot
        S[m, 0] = 0.0
        for k in range(orders[m]):
            C[m, k + 1] = re[j]
            S[m, k + 1] = -im[j]
            j += 1


@njit(cache=True, nogil=True)
def _dirichlet_table(omega, N, J):
    """``D[j] = sum_t cos(j w t)`` over the centred frame, ``j = 0..J``.

    ``D[j] = sin(N j w / 2) / sin(j w / 2)``; numerator and denominator follow
    the three-term sine recurrence, so the table costs four sines in all.
    """
    D = np.empty(J + 1)
    D[0] = N
    h = 0.5 * omega
    c_den = 2.0 * math.cos(h)
    c_num = 2.0 * math.cos(N * h)
    den_prev, den = 0.0, math.sin(h)
    num_prev, num = 0.0, math.sin(N * h)
    for j in range(1, J + 1):
        if abs(den) < 1e-9:
            m = round(j * h / math.pi)
            D[j] = N * (1.0 if (m * (N - 1)) % 2 == 0 else -1.0)
        else:
            D[j] = num / den
        den_prev, den = den, c_den * den - den_prev
        num_prev, num = num, c_num * num - num_prev
    return D


@njit(cache=True, nogil=True)
def _gram(omega, N, L, C, S, mask):
    """Cosine (0..L) and sine (1..L) Gram blocks restricted to harmonics with ``mask``.

    Returns the index lists of the kept cosine and sine columns and their counts.
    """
    D = _dirichlet_table(omega, N, 2 * L)
    ic = np.empty(L + 1, dtype=np.int64)
    isn = np.empty(L, dtype=np.int64)
    nc = 0
    ns = 0
    ic[nc] = 0
    nc += 1
    for k in range(1, L + 1):
        if mask[k]:
            ic[nc] = k
            nc += 1
            isn[ns] = k
            ns += 1
    for a in range(nc):
        for b in range(a + 1):
            k = ic[a]
            l = ic[b]
            C[a, b] = 0.5 * (D[k - l] + D[k + l])
    for a in range(ns):
        for b in range(a + 1):
            k = isn[a]
            l = isn[b]
            S[a, b] = 0.5 * (D[k - l] - D[k + l])
    return ic, nc, isn, ns


@njit(cache=True, nogil=True)
def _nested_energies(c, s, omega, N, L, energies):
    """Energy explained by every order ``0..L`` at ``omega``, from the projections
    ``c``, ``s`` (k = 0..L); see :func:`_nested_fit`."""
    C = np.zeros((L + 1, L + 1))
    S = np.zeros((max(L, 1), max(L, 1)))
    u = np.zeros(L + 1)
    v = np.zeros(L + 1)
    return _nested_fit(c, s, omega, N, L, energies, C, S, u, v)


@njit(cache=True, nogil=True, fastmath=_FASTMATH)
def _chol_row(A, i):
    """Row ``i`` of the lower Cholesky factor, in place (rows above already done).

    Returns False where the pivot is not safely positive.
    """
    for j in range(i):
        val = A[i, j]
        for k in range(j):
            val -= A[i, k] * A[j, k]
        A[i, j] = val / A[j, j]
    d = A[i, i]
    for k in range(i):
        d -= A[i, k] * A[i, k]
    if d <= 1e-10 * abs(A[i, i]) or d <= 0.0:
        return False
    A[i, i] = math.sqrt(d)
    return True


@njit(cache=True, nogil=True)
def _nested_fit(c, s, omega, N, L, energies, C, S, u, v):
    """Nested least squares for the orders ``0..L`` by a row-wise Cholesky factorisation.

    The factors of the cosine and sine Gram blocks and the forward-solved
    projections grow one order at a time, each order adding its energy:
    ``energies[l]`` is the energy explained by the order-``l`` model.  ``C``,
    ``S``, ``u``, ``v`` are scratch arrays for the factors and the solved
    projections.  Returns the highest order whose Gram blocks stayed positive
    definite (``< L`` when harmonics come too close to 0 or to the Nyquist
    frequency for the frame length).
    """
    mask = np.ones(L + 1, dtype=np.bool_)
    _gram(omega, N, L, C, S, mask)
    if not _chol_row(C, 0):
        energies[0] = 0.0
        return 0
    u[0] = c[0] / C[0, 0]
    e = u[0] * u[0]
    energies[0] = e
    for l in range(1, L + 1):
        if not _chol_row(C, l) or not _chol_row(S, l - 1):
            return l - 1
        val = c[l]
        for k in range(l):
            val -= C[l, k] * u[k]
        u[l] = val / C[l, l]
        val = s[l]
        for k in range(l - 1):
            val -= S[l - 1, k] * v[k + 1]
        v[l] = val / S[l - 1, l - 1]
        e += u[l] * u[l] + v[l] * v[l]
        energies[l] = e
    return L


@njit(cache=True, nogil=True)
def refine_f0(x, omega0, L, rel_step):
    """Maximise the explained energy of order ``L`` near ``omega0``.

    Three-point parabolic interpolation with a step of ``rel_step * omega0``, the
    three energies from one pass over the samples.  A vertex more than 1.5 steps
    away moves the centre there and repeats, at most three times.

    Returns
    -------
    float
        Refined f0, radians per sample.
    """
    N = x.shape[0]
    d = rel_step * omega0
    PC = np.empty((3, L + 1))
    PS = np.empty((3, L + 1))
    en = np.zeros(L + 1)
    e3 = np.empty(3)
    orders = np.array([L, L, L])
    w = omega0
    for _ in range(3):
        om = np.array([w - d, w, w + d])
        _multi_projections(x, om, orders, PC, PS)
        for m in range(3):
            k = _nested_energies(PC[m], PS[m], om[m], N, L, en)
            if k < L:
                return w
            e3[m] = en[L]
        den = e3[0] - 2.0 * e3[1] + e3[2]
        if den < 0.0:
            off = 0.5 * (e3[0] - e3[2]) / den
            if abs(off) <= 1.5:
                return w + off * d
        w = w + (1.5 * d if e3[2] > e3[0] else -1.5 * d)
    return w


@njit(cache=True, nogil=True, fastmath=_FASTMATH)
def _near_orthogonal_solve(c, s, D, L, ac, bs):
    """Least-squares coefficients when the Gram blocks are nearly diagonal.

    ``C_kl = (D[|k-l|] + D[k+l]) / 2`` (k, l = 0..L) and ``S_kl = (D[|k-l|] -
    D[k+l]) / 2`` (k, l = 1..L).  Two Jacobi sweeps from the diagonal solution;
    the off-diagonal terms of a frame of whole periods are a fraction of a
    sample's worth against ``N / 2`` on the diagonal, so the error left is of
    the order of the coupling cubed.
    """
    a0 = np.empty(L + 1)
    b0 = np.zeros(L + 1)
    for k in range(L + 1):
        a0[k] = c[k] / (0.5 * (D[0] + D[2 * k]))
    for k in range(1, L + 1):
        b0[k] = s[k] / (0.5 * (D[0] - D[2 * k]))
    for _ in range(2):
        for k in range(L + 1):
            acc = 0.0
            for l in range(L + 1):
                if l != k:
                    acc += 0.5 * (D[abs(k - l)] + D[k + l]) * a0[l]
            ac[k] = (c[k] - acc) / (0.5 * (D[0] + D[2 * k]))
        bs[0] = 0.0
        for k in range(1, L + 1):
            acc = 0.0
            for l in range(1, L + 1):
                if l != k:
                    acc += 0.5 * (D[abs(k - l)] - D[k + l]) * b0[l]
            bs[k] = (s[k] - acc) / (0.5 * (D[0] - D[2 * k]))
        for k in range(L + 1):
            a0[k] = ac[k]
            b0[k] = bs[k]


@njit(cache=True, nogil=True)
def select_order(energies, usable, R, N, pen_h, pen_f, res_floor=0.0):
    """MAP order (0 = noise only) and its cost gain over the noise-only model (nats)."""
    half = 0.5 * N
    floor = max(R * 1e-12, res_floor)
    r0 = R - energies[0]
    if r0 < floor:
        r0 = floor
    c0 = half * math.log(r0)
    best = c0
    best_l = 0
    for l in range(1, usable + 1):
        r = R - energies[l]
        if r < floor:
            r = floor
        cost = half * math.log(r) + l * pen_h + pen_f
        if cost < best:
            best = cost
            best_l = l
    return best_l, c0 - best


@njit(cache=True, nogil=True)
def _interp_table(table, omega):
    """Linear interpolation of ``table`` sampled uniformly on [0, pi] at ``omega``."""
    pos = omega / math.pi * (table.shape[0] - 1)
    i = int(pos)
    if i >= table.shape[0] - 1:
        return table[table.shape[0] - 1]
    a = pos - i
    return table[i] * (1.0 - a) + table[i + 1] * a


@njit(cache=True, nogil=True)
def analyse_frame(x, xs, ratio, ra, gain, omega0, order0, lmax, lmax_s, pen_h, pen_f, noise_var,
                  out_amps):
    """Refine f0, choose the order and fit amplitudes for one voiced frame.

    Parameters
    ----------
    x : ndarray, shape (N,)
        Frame the model is fitted to (possibly prewhitened), at the analysis rate.
    xs : ndarray, shape (Ns,)
        The same stretch at the search rate, ``ratio`` times lower (``xs`` may be
        ``x`` itself with ``ratio = 1``): f0 is refined on it with at most
        ``lmax_s`` harmonics.
    ratio : float
        Analysis rate / search rate (>= 1).
    ra : float
        Energy of the frame before prewhitening, mean removed (for the
        harmonics-to-noise ratio).
    gain : ndarray, shape (M,)
        Magnitude response of the prewhitening filter sampled uniformly on
        [0, pi] rad/sample; the amplitudes fitted on ``x`` are divided by it.
    omega0 : float
        Starting f0, radians per sample at the analysis rate.
    order0 : int
        Model order found by the search stage; refinement uses it clipped to
        ``MIN_REFINE_ORDER .. MAX_REFINE_ORDER``.
    lmax : int
        Highest order considered by the order selection (analysis band).
    lmax_s : int
        Highest harmonic inside the search band.
    pen_h, pen_f : float
        MAP penalties per harmonic and for the frequency (nats).
    noise_var : float
        Noise power per sample the frame is assumed to hold at least (a floor
        under the residual, so that rounding noise never passes for a harmonic).
    out_amps : ndarray, shape (H,)
        Receives the amplitude of harmonic ``k`` at ``k - 1``: 0 above the
        selected order and for harmonics whose own evidence is below their
        penalty (reported absent).

    Returns
    -------
    omega : float
        Refined f0, radians per sample at the analysis rate.
    order : int
        Selected model order.
    hnr_db : float
        Harmonics-to-noise ratio of the frame before prewhitening, dB.
    """
    N = x.shape[0]
    Ns = xs.shape[0]
    L0 = max(1, min(max(order0, MIN_REFINE_ORDER), MAX_REFINE_ORDER, lmax_s))
    # step: about a third of the half-width of the order-L0 energy peak, wide
    # enough for the search stage's error, narrow enough for a near-quadratic peak
    ws0 = omega0 * ratio
    w = refine_f0(xs, ws0, L0, 0.35 * math.pi / (Ns * ws0 * L0)) / ratio
    # Every order at the refined f0, on the full band: order selection and
    # amplitudes.  Over a whole number of periods the harmonic columns are
    # orthogonal up to the rounding of the length to whole samples, so the normal
    # equations need no factorisation: the diagonal solution plus one Jacobi
    # correction for the small remaining coupling.
    n_full = N
    M = int(N * w / (2.0 * math.pi))
    if M >= 2:
        Np = min(N, int(round(M * 2.0 * math.pi / w)))
        off = (N - Np) // 2
        x = x[off:off + Np]
        N = Np
    R = 0.0
    for n in range(N):
        R += x[n] * x[n]
    res_floor = N * noise_var
    c = np.empty(lmax + 1)
    s = np.empty(lmax + 1)
    projections(x, w, lmax, c, s)
    D = _dirichlet_table(w, N, 2 * lmax)
    ac = np.empty(lmax + 1)
    bs = np.empty(lmax + 1)
    _near_orthogonal_solve(c, s, D, lmax, ac, bs)
    en = np.empty(lmax + 1)
    e = c[0] * ac[0]
    en[0] = e
    for k in range(1, lmax + 1):
        e += c[k] * ac[k] + s[k] * bs[k]
        en[k] = e
    lsel, _ = select_order(en, lmax, R, N, pen_h, pen_f, res_floor)
    if lsel == 0:
        lsel = min(L0, lmax)
    for k in range(out_amps.shape[0]):
        out_amps[k] = 0.0
    if lsel < 1:
        return w, 0, np.nan
    amps = np.zeros(lsel + 1)
    for k in range(1, lsel + 1):
        amps[k] = math.sqrt(ac[k] * ac[k] + bs[k] * bs[k])
    sigma2 = max(R - en[lsel], R * 1e-12, res_floor) / N
    harm = 0.0
    for k in range(1, lsel + 1):
        # log-likelihood gain of harmonic k, (energy of a sinusoid) / (2 sigma^2),
        # against its MAP penalty: below it the harmonic is reported absent.
        if 0.25 * N * amps[k] * amps[k] / sigma2 < pen_h:
            continue
        a = amps[k] / _interp_table(gain, k * w)
        if k <= out_amps.shape[0]:
            out_amps[k - 1] = a
        harm += 0.5 * n_full * a * a
    if not (ra > 0.0) or harm <= 0.0:
        return w, lsel, np.nan
    resid = max(ra - harm, ra * 1e-10)
    return w, lsel, 10.0 * math.log10(harm / resid)


@njit(cache=True, nogil=True)
def analyse_frames(fw, fs, ratio, ra, gain, omega0, order0, band_w, H, pen_h, pen_f, noise_var):
    """:func:`analyse_frame` over a block of frames.

    ``fw`` (F, N) are the frames at the analysis rate, ``fs`` (F, Ns) at the
    search rate (``ratio`` times lower), ``ra`` (F,) their energies before
    prewhitening, ``noise_var`` (F,) the least noise power per sample each
    frame is assumed to hold.  ``band_w`` is the analysed band edge in radians per sample
    (analysis rate): harmonics above it are neither fitted nor reported (NaN);
    the search band is ``band_w * ratio`` capped at 0.95 pi of the search rate.

    Returns
    -------
    omega (F,), order (F,), hnr_db (F,), amplitudes (F, H)
    """
    F = fw.shape[0]
    w_out = np.empty(F)
    l_out = np.empty(F, dtype=np.int64)
    h_out = np.empty(F)
    a_out = np.full((F, H), np.nan)
    amps = np.zeros(H)
    band_s = min(band_w * ratio, 0.95 * math.pi)
    for i in range(F):
        lmax = max(1, min(H, int(band_w / omega0[i])))
        lmax_s = max(1, int(band_s / (omega0[i] * ratio)))
        w, L, h = analyse_frame(fw[i], fs[i], ratio, ra[i], gain, omega0[i], order0[i], lmax,
                                lmax_s, pen_h, pen_f, noise_var[i], amps)
        w_out[i] = w
        l_out[i] = L
        h_out[i] = h
        top = min(H, int(band_w / w))
        for k in range(top):
            a_out[i, k] = amps[k] if k < lmax else 0.0
    return w_out, l_out, h_out, a_out


def crlb_f0(amplitudes, n_samples: int, noise_var: float, sr: float) -> float:
    """Cramér-Rao bound on the standard deviation of f0 (Hz) for a real harmonic signal.

    Asymptotic bound for ``x[n] = sum_k A_k cos(k w0 n + phi_k) + e[n]`` in white
    Gaussian noise of variance ``noise_var``:

    .. math::  \\mathrm{var}(\\hat\\omega_0) \\ge \\frac{24\\,\\sigma^2}{N (N^2 - 1) \\sum_k k^2 A_k^2}

    References
    ----------
    M. G. Christensen and A. Jakobsson, *Multi-Pitch Estimation*, Morgan & Claypool,
    2009, ch. 2 (Cramér-Rao lower bound of the fundamental frequency).
    """
    a = np.asarray(amplitudes, dtype=np.float64)
    k = np.arange(1, a.size + 1)
    n = float(n_samples)
    var_w = 24.0 * noise_var / (n * (n * n - 1.0) * np.sum(k**2 * a**2))
    return float(np.sqrt(var_w) * sr / (2.0 * np.pi))
