"""A random-convolution feature transform with fixed kernels (the MiniRocket method).

Implemented from the published description (Dempster, Schmidt & Webb, "MiniRocket: A very
fast (almost) deterministic transform for time series classification", KDD 2021,
arXiv:2012.08791):

- 84 kernels of length 9, weight −1 at six positions and 2 at three (every choice of three);
- dilations ⌊2^e⌋ for up to 32 exponents e spread evenly over 0 … log2((length − 1)/8),
  duplicates merged, features shared out over the dilations in proportion to how often
  each occurred;
- biases: quantiles of one random training case's convolution output, at the fractional
  parts of k·φ (φ the golden ratio), k = 1, 2, …;
- one feature per bias: the proportion of positive values (PPV) of convolution minus bias;
- "same" zero-padded convolution for kernel/dilation pairs whose (dilation index + kernel
  index) is even, only the unpadded (valid) part otherwise;
- several channels: each kernel/dilation pair sums its convolution over a random subset
  of 1 … min(channels, 9) channels.

Convolution outputs are computed by one order of additions everywhere (``_conv``), so the
batch and the rolling transform compare identical numbers with the biases.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np

KERNEL_LENGTH = 9
N_KERNELS = 84
MAX_DILATIONS = 32
DEFAULT_FEATURES = 10_000
GOLDEN_RATIO = (1.0 + np.sqrt(5.0)) / 2.0


def kernel_positions() -> np.ndarray:
    """(84, 3) positions of the weight-2 taps of each kernel, in lexicographic order."""
    return np.array(list(combinations(range(KERNEL_LENGTH), 3)), dtype=np.int64)


def kernel_weights() -> np.ndarray:
    """(84, 9) kernel weights: −1 everywhere, 2 at the three positions of ``kernel_positions``."""
    w = -np.ones((N_KERNELS, KERNEL_LENGTH))
    np.put_along_axis(w, kernel_positions(), 2.0, axis=1)
    return w


def dilations_for(length: int, n_features: int = DEFAULT_FEATURES, max_dilations: int = MAX_DILATIONS
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Dilations and features per kernel at each dilation for series of ``length`` samples.

    Returns (dilations (n,), features_per_kernel (n,)); the features per kernel sum to
    n_features // 84 (so 9,996 features for the default 10,000).
    """
    if length < KERNEL_LENGTH:
        raise ValueError(f"series must have at least {KERNEL_LENGTH} samples, got {length}")
    per_kernel = max(1, n_features // N_KERNELS)
    n_exp = min(per_kernel, max_dilations)
    top = np.log2((length - 1) / (KERNEL_LENGTH - 1))
    raw = np.floor(2.0 ** np.linspace(0.0, top, n_exp)).astype(np.int64)
    dil, counts = np.unique(raw, return_counts=True)
    feats = (counts * (per_kernel / n_exp)).astype(np.int64)
    i = 0
    while feats.sum() < per_kernel:
        feats[i % len(feats)] += 1
        i += 1
    return dil, feats


def golden_quantiles(n: int) -> np.ndarray:
    """Fractional parts of k·φ for k = 1 … n: a low-discrepancy sequence in (0, 1)."""
    return (np.arange(1, n + 1) * GOLDEN_RATIO) % 1.0


@dataclass
class MiniRocketParams:
    """A fitted transform for series of ``length`` samples and ``n_channels`` channels.

    dilations (n_dil,) int; features_per_kernel (n_dil,) int; channel_mask (n_dil, 84,
    channels) 0/1 float; biases (n_features,) in order dilation, kernel, feature.
    """

    length: int
    n_channels: int
    dilations: np.ndarray
    features_per_kernel: np.ndarray
    channel_mask: np.ndarray
    biases: np.ndarray

    @property
    def n_features(self) -> int:
        return int(N_KERNELS * self.features_per_kernel.sum())

    def offsets(self) -> np.ndarray:
        """Index of each dilation's first feature, (n_dil + 1,)."""
        return np.concatenate([[0], np.cumsum(N_KERNELS * self.features_per_kernel)])

    def padded(self, di: int) -> np.ndarray:
        """(84,) bool: which kernels at dilation index di pool over the zero-padded output."""
        return (di + np.arange(N_KERNELS)) % 2 == 0


def _conv(taps: np.ndarray, mask: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Convolution outputs from tap values.

    taps: (9, channels, ...) the sample under each kernel tap (0 where padded); mask: (84,
    channels) 0/1, the channels each kernel sums over. Returns (84, ...): per channel
    3·(sum of the three weight-2 taps) − (sum of all nine), then summed over the kernel's
    channels. Additions are elementwise in a fixed order, so equal inputs give bit-equal
    outputs whatever the array shapes (the batch and rolling transforms rely on this).
    """
    extra = (None,) * (taps.ndim - 2)
    alpha = taps[0]
    for k in range(1, KERNEL_LENGTH):
        alpha = alpha + taps[k]                                  # (channels, ...)
    gamma = taps[beta[:, 0]] + taps[beta[:, 1]]
    gamma = gamma + taps[beta[:, 2]]                             # (84, channels, ...)
    per_channel = 3.0 * gamma - alpha[None]
    out = mask[(slice(None), 0) + extra] * per_channel[:, 0]
    for c in range(1, taps.shape[1]):
        out = out + mask[(slice(None), c) + extra] * per_channel[:, c]
    return out


def _padded_taps(x: np.ndarray, dilation: int) -> np.ndarray:
    """Taps (9, channels, m, length) of "same" convolution with zero padding; x (m, channels, length)."""
    m, n_ch, n = x.shape
    p = 4 * dilation
    xp = np.zeros((n_ch, m, n + 2 * p))
    xp[:, :, p:p + n] = x.transpose(1, 0, 2)
    return np.stack([xp[:, :, k * dilation:k * dilation + n] for k in range(KERNEL_LENGTH)])


def fit_minirocket(x: np.ndarray, n_features: int = DEFAULT_FEATURES, seed: int = 0) -> MiniRocketParams:
    """Fit the transform (dilations, channel subsets, biases) to training cases x (m, channels, length)."""
    x = np.asarray(x, dtype=float)
    m, n_ch, n = x.shape
    rng = np.random.default_rng(seed)
    dil, fpk = dilations_for(n, n_features)
    beta = kernel_positions()
    quant = golden_quantiles(int(N_KERNELS * fpk.sum()))
    mask = np.zeros((len(dil), N_KERNELS, n_ch))
    top = np.log2(min(n_ch, KERNEL_LENGTH) + 1)
    for di in range(len(dil)):
        for k in range(N_KERNELS):
            count = int(2.0 ** rng.uniform(0.0, top))
            mask[di, k, rng.choice(n_ch, min(count, n_ch), replace=False)] = 1.0
    biases = np.empty(len(quant))
    start = 0
    for di, d in enumerate(dil):
        f = int(fpk[di])
        pick = rng.integers(m, size=N_KERNELS)
        taps = _padded_taps(x[pick], int(d))                  # (9, ch, 84, n): case i for kernel i
        conv = _conv(taps, mask[di], beta)                      # (84 kernels, 84 cases, n)
        own = conv[np.arange(N_KERNELS), np.arange(N_KERNELS)]  # kernel k on its own random case
        for k in range(N_KERNELS):
            biases[start + k * f:start + (k + 1) * f] = np.quantile(own[k], quant[start + k * f:start + (k + 1) * f])
        start += N_KERNELS * f
    return MiniRocketParams(n, n_ch, dil, fpk, mask, biases)


def minirocket_transform(params: MiniRocketParams, x: np.ndarray, chunk: int = 32) -> np.ndarray:
    """PPV features (m, n_features) of cases x (m, channels, length)."""
    x = np.asarray(x, dtype=float)
    m, n_ch, n = x.shape
    if n != params.length or n_ch != params.n_channels:
        raise ValueError(f"cases are {n_ch}×{n}; the transform was fitted to {params.n_channels}×{params.length}")
    beta = kernel_positions()
    out = np.empty((m, params.n_features))
    offs = params.offsets()
    for a in range(0, m, chunk):
        xb = x[a:a + chunk]
        for di, d in enumerate(params.dilations):
            d = int(d)
            f = int(params.features_per_kernel[di])
            b = params.biases[offs[di]:offs[di + 1]].reshape(N_KERNELS, f)
            conv = _conv(_padded_taps(xb, d), params.channel_mask[di], beta)   # (84, mb, n)
            pad = params.padded(di)
            p = 4 * d
            counts = np.empty((N_KERNELS, f, len(xb)))
            counts[pad] = (conv[pad][:, None] > b[pad][:, :, None, None]).sum(axis=-1)
            counts[~pad] = (conv[~pad][:, None, :, p:n - p] > b[~pad][:, :, None, None]).sum(axis=-1)
            denom = np.where(pad, float(n), float(n - 2 * p))[:, None, None]
            out[a:a + chunk, offs[di]:offs[di + 1]] = (counts / denom).reshape(N_KERNELS * f, -1).T
    return out


# --- rolling transform ------------------------------------------------------------------
#
# Within a window [s, s + n), a position's convolution depends on the window only through
# which taps fall outside it. At dilation d the window splits into nine bands where that
# set is fixed: four bands of d positions at the left edge (taps k ≥ 4 − i inside), the
# interior [s + 4d, s + n − 4d) (all taps), four bands of d at the right edge (taps
# k ≤ 7 − i). Each band is a sliding range of absolute positions, so the count of
# (convolution > bias) over it changes by the positions that enter minus those that
# leave: work proportional to the hop, for any window length.


def _band_layout(n: int, d: int) -> tuple[np.ndarray, np.ndarray]:
    """Band starts relative to the window start (9,), band lengths (9,), for dilation d."""
    starts = [i * d for i in range(4)] + [4 * d] + [n - (4 - i) * d for i in range(4)]
    lengths = [d] * 4 + [n - 8 * d] + [d] * 4
    return np.array(starts), np.array(lengths)


def _band_taps() -> np.ndarray:
    """(9 bands, 9 taps) bool: which taps lie inside the window for positions in each band."""
    k = np.arange(KERNEL_LENGTH)
    rows = [k >= 4 - i for i in range(4)] + [np.ones(KERNEL_LENGTH, bool)] + [k <= 7 - i for i in range(4)]
    return np.array(rows)


class RollingMiniRocket:
    """MiniRocket features of the latest window of a stream, updated per hop.

    State: a ring of the last ``length + hop`` samples (channels × ring), the count of
    samples seen and, per dilation, the running counts (84, features, 9 bands) of positive
    convolution-minus-bias values. ``push`` takes a block (n, channels) and returns the
    features (hops, n_features) of each window completed and the count of samples seen at
    each window's end, like ``Windower.push``.
    """

    def __init__(self, params: MiniRocketParams, hop: int):
        self.params = params
        self.hop = int(hop)
        self.ring_len = params.length + self.hop
        self.ring = np.zeros((params.n_channels, self.ring_len))
        self.seen = 0
        self.counts = [np.zeros((N_KERNELS, int(f), 9)) for f in params.features_per_kernel]
        self.beta = kernel_positions()
        self.band_taps = _band_taps()
        self.layouts = [_band_layout(params.length, int(d)) for d in params.dilations]
        self.window_start = None

    def _next_emit(self) -> int:
        n = self.params.length
        if self.seen < n:
            return n
        return self.seen + self.hop - ((self.seen - n) % self.hop)

    def push(self, block: np.ndarray) -> tuple[np.ndarray, list[int]]:
        block = np.asarray(block, dtype=float)
        out, ends = [], []
        i = 0
        while i < block.shape[0]:
            target = self._next_emit()
            take = min(block.shape[0] - i, target - self.seen)
            idx = (self.seen + np.arange(take)) % self.ring_len
            self.ring[:, idx] = block[i:i + take].T
            self.seen += take
            i += take
            if self.seen == target:
                out.append(self._advance(self.seen - self.params.length))
                ends.append(self.seen)
        if not out:
            return np.empty((0, self.params.n_features)), []
        return np.stack(out), ends

    def _advance(self, start: int) -> np.ndarray:
        """Move the window to [start, start + length) and return its features."""
        prev = self.window_start
        n = self.params.length
        offs = self.params.offsets()
        feats = np.empty(self.params.n_features)
        for di, d in enumerate(self.params.dilations):
            d = int(d)
            rel, lens = self.layouts[di]
            pos, band, sign = [], [], []
            for bi in range(9):
                a_new, b_new = start + rel[bi], start + rel[bi] + lens[bi]
                if prev is None:
                    enter = np.arange(a_new, b_new)
                    leave = np.empty(0, dtype=np.int64)
                else:
                    a_old, b_old = prev + rel[bi], prev + rel[bi] + lens[bi]
                    enter = np.arange(max(a_new, b_old), b_new)
                    leave = np.arange(a_old, min(b_old, a_new))
                pos += [enter, leave]
                band += [np.full(len(enter), bi), np.full(len(leave), bi)]
                sign += [np.ones(len(enter)), -np.ones(len(leave))]
            pos = np.concatenate(pos)
            if len(pos):
                band = np.concatenate(band)
                sign = np.concatenate(sign)
                self._count(di, d, pos, band, sign)
            f = int(self.params.features_per_kernel[di])
            c = self.counts[di]
            pad = self.params.padded(di)
            ppv = np.where(pad[:, None], c.sum(axis=2) / float(n), c[:, :, 4] / float(n - 8 * d))
            feats[offs[di]:offs[di + 1]] = ppv.reshape(N_KERNELS * f)
        self.window_start = start
        return feats

    def _count(self, di: int, d: int, pos: np.ndarray, band: np.ndarray, sign: np.ndarray) -> None:
        """Add sign × (convolution > bias) at absolute positions pos, each in its band's variant."""
        f = int(self.params.features_per_kernel[di])
        offs = self.params.offsets()
        b = self.params.biases[offs[di]:offs[di + 1]].reshape(N_KERNELS, f)
        tap_pos = pos[None, :] + (np.arange(KERNEL_LENGTH)[:, None] - 4) * d      # (9, P)
        inside = self.band_taps[band].T                                            # (9, P)
        vals = self.ring[:, tap_pos % self.ring_len]                                # (ch, 9, P)
        taps = np.where(inside[None], vals, 0.0).transpose(1, 0, 2)                # (9, ch, P)
        conv = _conv(taps, self.params.channel_mask[di], self.beta)                # (84, P)
        positive = (conv[:, None, :] > b[:, :, None]).astype(float)                # (84, f, P)
        weight = np.zeros((len(pos), 9))
        weight[np.arange(len(pos)), band] = sign
        self.counts[di] += positive @ weight
