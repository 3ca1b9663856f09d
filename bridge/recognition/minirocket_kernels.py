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
                row = ys[c, u]
                al = alpha[u]
                for p in range(p_n):
                    al[p] = row[p]
                for k in range(1, 9):  # α = ((tap 0 + tap 1) + tap 2) + …, in order
                    tap = row[k * d:k * d + p_n]
                    for p in range(p_n):
                        al[p] = al[p] + tap[p]
            for k in range(84):
                u = kernel_u[di, k]
                row = ys[c, u]
                o0, o1, o2 = beta[k, 0] * d, beta[k, 1] * d, beta[k, 2] * d
                t0, t1, t2 = row[o0:o0 + p_n], row[o1:o1 + p_n], row[o2:o2 + p_n]
                al = alpha[u]
                for p in range(p_n):  # loops over 1-d slices: the compiler vectorises them
                    g = t0[p] + t1[p]
                    g = g + t2[p]
                    conv[p] = 3.0 * g - al[p]
                base = offsets[di] + k * f
                for j in range(f):
                    b = biases[base + j]
                    count = 0
                    for p in range(p_n):
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
                row = xp[c, ch]
                al = alpha[ch]
                for p in range(n):
                    al[p] = row[s0 + p]
                for k in range(1, 9):  # α in order of taps, as the numpy path adds them
                    tap = row[s0 + k * d:s0 + k * d + n]
                    for p in range(n):
                        al[p] = al[p] + tap[p]
            for k in range(84):
                o0, o1, o2 = s0 + beta[k, 0] * d, s0 + beta[k, 1] * d, s0 + beta[k, 2] * d
                first = True
                for ch in range(n_ch):
                    if mask[di, k, ch] == 0.0:
                        continue
                    row = xp[c, ch]
                    t0, t1, t2 = row[o0:o0 + n], row[o1:o1 + n], row[o2:o2 + n]
                    al = alpha[ch]
                    if first:  # two branch-free loops over 1-d slices, so each vectorises
                        for p in range(n):
                            g = t0[p] + t1[p]
                            g = g + t2[p]
                            conv[p] = 3.0 * g - al[p]
                        first = False
                    else:
                        for p in range(n):
                            g = t0[p] + t1[p]
                            g = g + t2[p]
                            conv[p] = conv[p] + (3.0 * g - al[p])
                padded = (di + k) % 2 == 0
                lo, hi = (0, n) if padded else (4 * d, n - 4 * d)
                base = offsets[di] + k * f
                pooled = conv[lo:hi]
                for j in range(f):
                    b = biases[base + j]
                    count = 0
                    for p in range(hi - lo):
                        count += pooled[p] > b
                    out[c, base + j] = count / (hi - lo)
