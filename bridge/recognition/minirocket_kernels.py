"""Compiled kernels for the batch MiniRocket transform (optional: needs numba, the
``accelerate`` extra). ``minirocket_transform`` uses them when numba imports and falls back
to its numpy path otherwise; the numpy path stays the reference the tests hold them to.

Each kernel repeats the numpy path's arithmetic one scalar at a time in the same order
(subset sums in channel order, α over the nine taps in order, γ = (tap b0 + tap b1) + tap
b2, output 3·γ − α; alternate edges add the channels' outputs in channel order), with no
fast-math, so the features are bit-equal. What the compiled loop saves is the memory
traffic of the numpy path's whole-array passes: each convolution output is compared with
its biases while still in a register.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def valid_features(ys, used, dilations, fpk, kernel_u, beta, biases, offsets, out):  # pragma: no cover - compiled
    """ys (m, U, n) channel-subset series; used (n_dil, U) bool; kernel_u (n_dil, 84);
    beta (84, 3); biases (n_features,); offsets (n_dil + 1,); out (m, n_features)."""
    m, n_sub, n = ys.shape
    conv = np.empty(n)
    for c in range(m):
        for di in range(dilations.shape[0]):
            d = dilations[di]
            p_n = n - 8 * d
            f = fpk[di]
            alpha = np.empty((n_sub, p_n))
            for u in range(n_sub):
                if not used[di, u]:
                    continue
                for p in range(p_n):
                    a = ys[c, u, p]
                    for k in range(1, 9):
                        a = a + ys[c, u, p + k * d]
                    alpha[u, p] = a
            for k in range(84):
                u = kernel_u[di, k]
                o0, o1, o2 = beta[k, 0] * d, beta[k, 1] * d, beta[k, 2] * d
                for p in range(p_n):
                    g = ys[c, u, p + o0] + ys[c, u, p + o1]
                    g = g + ys[c, u, p + o2]
                    conv[p] = 3.0 * g - alpha[u, p]
                base = offsets[di] + k * f
                for j in range(f):
                    b = biases[base + j]
                    count = 0
                    for p in range(p_n):  # a tight loop the compiler vectorises
                        count += conv[p] > b
                    out[c, base + j] = count / p_n


@njit(cache=True, nogil=True)
def alternate_features(xp, pad, dilations, fpk, mask, beta, biases, offsets, out):  # pragma: no cover - compiled
    """xp (m, ch, n + 8·max dilation) zero-padded series (pad samples of zeros each side);
    mask (n_dil, 84, ch) 0/1; biases, offsets, out as ``valid_features``."""
    m, n_ch, width = xp.shape
    n = width - 2 * pad
    conv = np.empty(n)
    for c in range(m):
        for di in range(dilations.shape[0]):
            d = dilations[di]
            s0 = pad - 4 * d
            f = fpk[di]
            alpha = np.empty((n_ch, n))
            for ch in range(n_ch):
                for p in range(n):
                    a = xp[c, ch, s0 + p]
                    for k in range(1, 9):
                        a = a + xp[c, ch, s0 + p + k * d]
                    alpha[ch, p] = a
            for k in range(84):
                o0, o1, o2 = s0 + beta[k, 0] * d, s0 + beta[k, 1] * d, s0 + beta[k, 2] * d
                first = True
                for ch in range(n_ch):
                    if mask[di, k, ch] == 0.0:
                        continue
                    if first:  # two branch-free loops, so each vectorises
                        for p in range(n):
                            g = xp[c, ch, p + o0] + xp[c, ch, p + o1]
                            g = g + xp[c, ch, p + o2]
                            conv[p] = 3.0 * g - alpha[ch, p]
                        first = False
                    else:
                        for p in range(n):
                            g = xp[c, ch, p + o0] + xp[c, ch, p + o1]
                            g = g + xp[c, ch, p + o2]
                            conv[p] = conv[p] + (3.0 * g - alpha[ch, p])
                padded = (di + k) % 2 == 0
                lo, hi = (0, n) if padded else (4 * d, n - 4 * d)
                base = offsets[di] + k * f
                for j in range(f):
                    b = biases[base + j]
                    count = 0
                    for p in range(lo, hi):
                        count += conv[p] > b
                    out[c, base + j] = count / (hi - lo)
