"""Inner kernels of computed order tracking (:class:`rundash.dsp.orders.OrderTracker`).

The tracker works through its revolutions in groups of about ``GROUP_SAMPLES``
samples; for each group these kernels fill work arrays the tracker owns and reuses, in
the working precision (float32 for float32 data). A group's grid has one row per
revolution and one column per window position ``i`` (sample ``na_k - 1 + i`` of
revolution ``k``, ``na_k`` its first sample); a window holds ``L_k + 2`` samples (the one
before the revolution, its own ``L_k`` and the first after it), and the grid's columns
past a short window are never read: every sum runs over exactly one window, so a
revolution's result depends on its own samples only, to the last bit, whatever the
grouping or the chunks fed.

- :func:`revolution_cubics`: the local angle ``u = theta - k`` as a cubic in ``i`` and
  the trapezoid weights of the window's two ends (float64, per revolution);
- :func:`weights_and_phase`: the quadrature weights ``W`` and the base order's phase
  ``2 pi base u`` on the grid (each a sum of products with the powers of ``i``);
- :func:`exponentials`: ``W cos`` and ``W sin`` of every order, by recurrence from the
  base order;
- :func:`window_products`: per revolution one small matrix product straight on the
  samples (no copy of them) and the rows' own quadratures;
- :func:`direct_levels`: direct p-p and rms of each block.

The method and its error bounds are in :mod:`rundash.dsp.orders`.
"""

from __future__ import annotations

import numpy as np


def revolution_cubics(c: np.ndarray, t: np.ndarray, fs: float, k0: int,
                      na: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per revolution k0, k0 + 1, ... (first samples ``na``, the last entry the first
    sample after them), from the speed profile's cubics ``c`` (3, n_revs) and reference
    times ``t``: the local angle ``u = theta - k`` at window position ``i`` (sample
    ``na_k - 1 + i``) as a cubic in ``i``, coefficients ``(A3, A2, A1, A0)`` (shape
    (4, n), float64), and the trapezoid weights of the window's first two and last two
    samples (shape (4, n))."""
    nr = na.size - 1
    # the profile's cubic of revolution k: c0 s^3 + c1 s^2 + c2 s with
    # s = (i - sigma) / fs, sigma = t_k fs - (na_k - 1)
    ks = np.arange(k0, k0 + nr)
    c = c[:, ks]
    sigma = t[ks] * fs - (na[:-1] - 1)
    h = 1.0 / fs
    B3, B2, B1 = c[0] * h ** 3, c[1] * h ** 2, c[2] * h
    A = np.empty((4, nr))
    A[0] = B3
    A[1] = B2 - 3.0 * B3 * sigma
    A[2] = B1 - (2.0 * B2 - 3.0 * B3 * sigma) * sigma
    A[3] = -(B1 - (B2 - B3 * sigma) * sigma) * sigma

    def u(i):
        return ((A[0] * i + A[1]) * i + A[2]) * i + A[3]

    # Trapezoid rule of the linear interpolant of the integrand over u in [0, 1]:
    # interior weights 0.5 (u(i+1) - u(i-1)); the limits u = 0 and u = 1 fall
    # between the window's first two and last two samples (linear interpolation).
    L = np.diff(na).astype(np.float64)
    u0, u1, u2 = u(0.0), u(1.0), u(2.0)
    uLm, uL, uL1 = u(L - 1.0), u(L), u(L + 1.0)
    ends = np.empty((4, nr))
    ends[0] = 0.5 * u1 * u1 / (u1 - u0)
    ends[1] = 0.5 * u1 * (u1 - 2.0 * u0) / (u1 - u0) + 0.5 * (u2 - u1)
    hR = 1.0 - uL
    mu = hR / (uL1 - uL)
    ends[2] = 0.5 * (uL - uLm) + 0.5 * hR * (2.0 - mu)
    ends[3] = 0.5 * hR * mu
    return A, ends


def weights_and_phase(A: np.ndarray, ends: np.ndarray, L: np.ndarray, ii: np.ndarray,
                      base_order: float, W: np.ndarray, ph: np.ndarray) -> None:
    """Fill ``W`` and ``ph`` (revolutions x window positions ``ii``): the trapezoid
    weights and the phase ``2 pi base_order u`` of each revolution's window, from its
    cubic ``A`` and end weights ``ends`` (:func:`revolution_cubics`), ``L`` its samples.
    Positions past a window (``i >= L + 2``) hold finite values that are never used."""
    work = W.dtype.type
    nr, stride = W.shape
    # the powers (i^3, i^2, i, 1) of the window positions: both cubics are then one
    # sum of products per grid point (einsum: no broadcast passes over the grid; each
    # point's sum runs over its own row's four terms in order, whatever the grid's size)
    iid = ii[:stride].astype(np.float64)
    pw = np.empty((4, stride), work)
    pw[0] = iid * iid * iid
    pw[1] = iid * iid
    pw[2] = iid
    pw[3] = 1.0
    # interior 0.5 (u(i+1) - u(i-1)) = 3 A3 i^2 + 2 A2 i + A1 + A3, exact for a cubic
    cw = np.empty((nr, 3), work)
    cw[:, 0] = 3.0 * A[0]
    cw[:, 1] = 2.0 * A[1]
    cw[:, 2] = A[2] + A[0]
    np.einsum("rk,ki->ri", cw, pw[1:], out=W)
    W[:, 0] = ends[0]
    W[:, 1] = ends[1]
    rows = np.arange(nr)
    W[rows, L] = ends[2]
    W[rows, L + 1] = ends[3]
    # phase of the base order, 2 pi base u, in the working precision
    P = np.ascontiguousarray(((2.0 * np.pi * base_order) * A).T.astype(work))
    np.einsum("rk,ki->ri", P, pw, out=ph)


def exponentials(ph: np.ndarray, W: np.ndarray, VT: np.ndarray, orders: np.ndarray,
                 base_order: float, powers, scratch) -> None:
    """Rows ``2 i`` and ``2 i + 1`` of ``VT`` (rows, revolutions, window): ``W cos`` and
    ``W sin`` of ``m_i ph / base_order`` for each order ``m_i``, ``ph`` the phase of the
    base order (the real part and minus the imaginary part of
    ``W exp(-j m_i ph / base_order)``).

    With ``powers`` (each order a whole multiple p <= MAX_POWER of the base order) the
    multiples are built by the recurrence ``e_(p+1) = e_p e_1`` from one cosine and sine
    of the base phase per sample (error bound tested against direct cos/sin); with
    ``powers`` None every order is computed directly. ``scratch(name, shape, dtype)``
    gives reused work arrays.
    """
    work = VT.dtype.type
    if powers is None:
        a = scratch("a", W.shape, work)
        for i, m in enumerate(orders):
            np.multiply(ph, work(m / base_order), out=a)
            np.cos(a, out=VT[2 * i])
            VT[2 * i] *= W
            np.sin(a, out=VT[2 * i + 1])
            VT[2 * i + 1] *= W
        return
    cs = scratch("cos", W.shape, work)
    sn = scratch("sin", W.shape, work)
    tmp = scratch("tmp", W.shape, work)
    np.cos(ph, out=cs)
    np.sin(ph, out=sn)
    # p = 1: W (cos, -sin)
    slot = {int(p): i for i, p in enumerate(powers)}
    pmax = int(max(powers))
    re = scratch("re1", W.shape, work) if 1 not in slot else VT[2 * slot[1]]
    im = scratch("im1", W.shape, work) if 1 not in slot else VT[2 * slot[1] + 1]
    np.multiply(cs, W, out=re)
    np.multiply(sn, W, out=im)
    spare = 0
    for p in range(2, pmax + 1):
        if p in slot:
            re2, im2 = VT[2 * slot[p]], VT[2 * slot[p] + 1]
        else:
            re2 = scratch(f"re_s{spare}", W.shape, work)
            im2 = scratch(f"im_s{spare}", W.shape, work)
            spare ^= 1
        # W (cos + j sin) of p + 1 times the base: (re + j im)(cos + j sin)
        np.multiply(re, cs, out=re2)
        np.multiply(im, sn, out=tmp)
        re2 -= tmp
        np.multiply(im, cs, out=im2)
        np.multiply(re, sn, out=tmp)
        im2 += tmp
        re, im = re2, im2


def window_products(VT: np.ndarray, data: np.ndarray, first: np.ndarray, Lw: np.ndarray,
                    core: np.ndarray, quad: np.ndarray) -> None:
    """Per revolution ``r``: ``core[r] = VT[:, r, :Lw[r]] @ data[:, w].T`` (rows x
    channels), ``w`` its window of ``Lw[r]`` samples from ``data`` column ``first[r]``,
    and ``quad[r]`` the sum of each of the first ``quad.shape[1]`` rows over the window
    alone (the quadrature of that row's function, e.g. of ``exp(-j m theta)``; zero
    exactly for an exact rule).

    ``VT`` (rows, revolutions, stride) needs ``stride > max(Lw)``. The product reads
    the samples in place (the window is a strided view for BLAS); the row sums are
    exact-window reductions (``reduceat`` over pairs of indices: a window, then the
    unused tail to skip), so neither depends on the grid's width."""
    matmul = np.matmul
    dT = data.T  # (samples, channels): a window is one slice of it
    for v, out, p, e, lw in zip(VT.transpose(1, 0, 2), core, first.tolist(),
                                (first + Lw).tolist(), Lw.tolist()):
        matmul(v[:, :lw], dT[p:e], out)
    _, nr, stride = VT.shape
    n_q = quad.shape[1]
    idx = np.empty(2 * nr, np.intp)
    idx[0::2] = np.arange(nr) * stride
    idx[1::2] = idx[0::2] + Lw
    sums = np.add.reduceat(VT[:n_q].reshape(n_q, nr * stride), idx, axis=1)
    quad[...] = sums[:, 0::2].T


#: Channels squared and summed together by :func:`direct_levels`.
SQUARE_ROWS = 4


def direct_levels(seg: np.ndarray, starts: np.ndarray, pp: np.ndarray, rms: np.ndarray,
                  sq: np.ndarray, *, want_pp: bool = True, want_rms: bool = True) -> None:
    """Direct p-p and rms of the blocks with first samples ``starts`` (record indices;
    the last entry is the first sample after them) over their own samples, ``seg`` the
    samples from ``starts[0]`` on and ``sq`` a work array of its shape. A level not
    wanted is set to NaN (its passes over the samples are not made)."""
    offs = starts[:-1] - starts[0]
    if want_rms:
        # the squares a few channels at a time, each summed while its rows of ``sq`` are
        # still in the core's cache (a whole group's squares outgrow it)
        n_ch = seg.shape[0]
        for c0 in range(0, n_ch, SQUARE_ROWS):
            c1 = min(c0 + SQUARE_ROWS, n_ch)
            q = sq[:c1 - c0]
            np.square(seg[c0:c1], out=q)
            rms[c0:c1] = np.add.reduceat(q, offs, axis=1)
        rms /= np.diff(starts)
        np.sqrt(rms, out=rms)
    else:
        rms[...] = np.nan
    if want_pp:
        pp[...] = np.maximum.reduceat(seg, offs, axis=1)
        pp -= np.minimum.reduceat(seg, offs, axis=1)
    else:
        pp[...] = np.nan
