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
  index) is even, only the unpadded (valid) part otherwise (edge mode "alternate", the
  paper's; see below for "valid");
- several channels: each kernel/dilation pair sums its convolution over a random subset
  of 1 … min(channels, 9) channels.

Edge modes. "alternate" is the paper's padding above, kept for fits on ready-cut cases
(`.ts` files: the published accuracy checks use it). "valid" pools every feature over the
valid positions only (those whose nine taps all lie inside the window), and takes the
biases from the valid part too. In a stream the window edges are arbitrary cuts, so zero
padding at them describes no real signal; with valid edges each feature is a sliding
count of (convolution > bias) over a fixed range of absolute positions, which a live
transform updates with only the hop's new positions (``RollingValidMiniRocket``) and a
replay computes for a whole block at once. Models fitted on recordings use "valid". The
cost is fewer pooled positions at large dilations (at the largest, 8 of a 200-sample
window). Measured (seed 0; tests/test_external_accuracy.py): GunPoint 1.0 valid vs 0.9933
alternate, BasicMotions 1.0 both; on the simulated troupe a little lower window accuracy
(docs/internals.md).

Convolution outputs are computed by one order of additions everywhere (``_conv``), so the
batch and the rolling transforms compare identical numbers with the biases.
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
EDGE_MODES = ("alternate", "valid")


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
    channels) 0/1 float; biases (n_features,) in order dilation, kernel, feature; edges:
    "alternate" (the paper's alternating zero padding) or "valid" (no padding anywhere).
    """

    length: int
    n_channels: int
    dilations: np.ndarray
    features_per_kernel: np.ndarray
    channel_mask: np.ndarray
    biases: np.ndarray
    edges: str = "alternate"

    def __post_init__(self):
        if self.edges not in EDGE_MODES:
            raise ValueError(f"edges must be one of {', '.join(EDGE_MODES)}, not {self.edges!r}")

    @property
    def n_features(self) -> int:
        return int(N_KERNELS * self.features_per_kernel.sum())

    def offsets(self) -> np.ndarray:
        """Index of each dilation's first feature, (n_dil + 1,)."""
        return np.concatenate([[0], np.cumsum(N_KERNELS * self.features_per_kernel)])

    def padded(self, di: int) -> np.ndarray:
        """(84,) bool: which kernels at dilation index di pool over the zero-padded output."""
        if self.edges == "valid":
            return np.zeros(N_KERNELS, bool)
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


def _conv_summed(taps: np.ndarray, mask: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Convolution outputs, channels summed first: the arithmetic of the "valid" edge mode.

    Same arguments and result as ``_conv`` up to rounding (convolution is linear: summing
    the channels of a kernel's subset and convolving once equals convolving each and
    summing). Cheaper: one series per distinct channel subset instead of one per kernel
    and channel. Order of additions, fixed so the rolling transform can repeat it: subset
    series = Σ over channels in order of mask·tap; α = Σ over the nine taps in order;
    γ = (tap b0 + tap b1) + tap b2; output 3·γ − α.
    """
    subsets, which = np.unique(mask, axis=0, return_inverse=True)
    which = which.ravel()
    extra = (None,) * (taps.ndim - 2)
    y = subsets[(None, slice(None), 0) + extra] * taps[:, 0][:, None]          # (9, subsets, ...)
    for c in range(1, taps.shape[1]):
        y = y + subsets[(None, slice(None), c) + extra] * taps[:, c][:, None]
    alpha = y[0]
    for k in range(1, KERNEL_LENGTH):
        alpha = alpha + y[k]
    gamma = y[beta[:, 0], which] + y[beta[:, 1], which]
    gamma = gamma + y[beta[:, 2], which]
    return 3.0 * gamma - alpha[which]


def _padded_taps(x: np.ndarray, dilation: int) -> np.ndarray:
    """Taps (9, channels, m, length) of "same" convolution with zero padding; x (m, channels, length)."""
    m, n_ch, n = x.shape
    p = 4 * dilation
    xp = np.zeros((n_ch, m, n + 2 * p))
    xp[:, :, p:p + n] = x.transpose(1, 0, 2)
    return np.stack([xp[:, :, k * dilation:k * dilation + n] for k in range(KERNEL_LENGTH)])


def fit_minirocket(x: np.ndarray, n_features: int = DEFAULT_FEATURES, seed: int = 0,
                   edges: str = "alternate") -> MiniRocketParams:
    """Fit the transform (dilations, channel subsets, biases) to training cases x (m, channels, length).

    With ``edges="valid"`` the biases are quantiles of the valid part of the convolution
    output (the positions the features pool over); the random draws are the same.
    """
    if edges not in EDGE_MODES:
        raise ValueError(f"edges must be one of {', '.join(EDGE_MODES)}, not {edges!r}")
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
        conv = (_conv_summed if edges == "valid" else _conv)(taps, mask[di], beta)  # (84 kernels, 84 cases, n)
        own = conv[np.arange(N_KERNELS), np.arange(N_KERNELS)]  # kernel k on its own random case
        if edges == "valid":
            own = own[:, 4 * int(d):n - 4 * int(d)]
        for k in range(N_KERNELS):
            biases[start + k * f:start + (k + 1) * f] = np.quantile(own[k], quant[start + k * f:start + (k + 1) * f])
        start += N_KERNELS * f
    return MiniRocketParams(n, n_ch, dil, fpk, mask, biases, edges)


def compiled_kernels():
    """The compiled kernels module (``minirocket_kernels``), or None without numba."""
    try:
        from . import minirocket_kernels
    except ImportError:
        return None
    return minirocket_kernels


def minirocket_transform(params: MiniRocketParams, x: np.ndarray, chunk: int | None = None,
                         engine: str = "auto") -> np.ndarray:
    """PPV features (m, n_features) of cases x (m, channels, length).

    engine: "numpy", "compiled" (the ``accelerate`` extra's kernels: same features, bit
    for bit) or "auto" (compiled when numba is installed).

    Bit-equal to ``reference_transform`` (same convolution outputs, same comparisons),
    computed with fewer passes: the taps of every kernel at a dilation are gathered from
    the series by precomputed flat indices (no zero-padded copies per dilation), only the
    channels a kernel sums over are convolved, in place, and the positive outcomes are
    counted as small integers along the positions axis. Cases go in chunks of ``chunk`` (by default sized to keep the
    working arrays near a few megabytes).
    """
    x = np.asarray(x, dtype=float)
    m, n_ch, n = x.shape
    if n != params.length or n_ch != params.n_channels:
        raise ValueError(f"cases are {n_ch}×{n}; the transform was fitted to {params.n_channels}×{params.length}")
    out = np.empty((m, params.n_features))
    if m == 0:
        return out
    if engine not in ("auto", "numpy", "compiled"):
        raise ValueError(f"engine must be auto, numpy or compiled, not {engine!r}")
    kernels = compiled_kernels() if engine != "numpy" else None
    if engine == "compiled" and kernels is None:
        raise ValueError("the compiled engine needs numba (pip install 'drape-bridge[accelerate]')")
    if kernels is not None:
        _compiled_features(params, kernels, x, out)
        return out
    if chunk is None:
        chunk = max(1, min(m, 2_000_000 // (N_KERNELS * n * max(4, int(params.features_per_kernel.max())))))
    plan = _batch_plan(params)
    for a in range(0, m, chunk):
        _batch_features(params, plan, x[a:a + chunk], out[a:a + chunk])
    return out


def _compiled_features(params: MiniRocketParams, kernels, x: np.ndarray, out: np.ndarray) -> None:
    """The batch transform by the compiled kernels (inputs laid out as the numpy path's)."""
    m, n_ch, n = x.shape
    dil = params.dilations.astype(np.int64)
    fpk = params.features_per_kernel.astype(np.int64)
    beta = kernel_positions()
    offs = params.offsets().astype(np.int64)
    if params.edges == "valid":
        subsets, which = np.unique(params.channel_mask.reshape(-1, n_ch), axis=0, return_inverse=True)
        which = which.reshape(len(dil), N_KERNELS).astype(np.int64)
        used = np.zeros((len(dil), len(subsets)), dtype=np.bool_)
        used[np.arange(len(dil))[:, None], which] = True
        ys = subsets[None, :, 0, None] * x[:, None, 0]
        for c in range(1, n_ch):
            ys = ys + subsets[None, :, c, None] * x[:, None, c]
        kernels.valid_features(np.ascontiguousarray(ys), used, dil, fpk, which, beta, params.biases, offs, out)
    else:
        pad = 4 * int(dil.max())
        xp = np.zeros((m, n_ch, n + 2 * pad))
        xp[:, :, pad:pad + n] = x
        kernels.alternate_features(xp, pad, dil, fpk, np.ascontiguousarray(params.channel_mask), beta,
                                   params.biases, offs, out)


def _batch_plan(params: MiniRocketParams) -> dict:
    """What ``_batch_features`` needs of params, worked out once per call.

    Per dilation the kernels are taken in an order (``order``) that makes the in-place
    steps plain slices: valid edges, grouped by channel subset; alternate, padded ones
    first, then by number of channels, most first (so the kernels with an s-th channel
    are a leading range of each group).
    """
    beta = kernel_positions()
    n_ch = params.n_channels
    plan = {"beta": beta, "offs": params.offsets(), "dil": []}
    if params.edges == "valid":
        subsets, which = np.unique(params.channel_mask.reshape(-1, n_ch), axis=0, return_inverse=True)
        plan["subsets"] = subsets
        which = which.reshape(len(params.dilations), N_KERNELS)
        for di in range(len(params.dilations)):
            order = np.argsort(which[di], kind="stable")
            ku = which[di][order]
            used, first = np.unique(ku, return_index=True)
            bounds = np.append(first, N_KERNELS)
            d, p = int(params.dilations[di]), params.length - 8 * int(params.dilations[di])
            # flat tap indices into the (subset, sample) series of a case, (84, P) per weight-2 tap
            taps = [(ku * params.length + beta[order, i] * d)[:, None] + np.arange(p) for i in range(3)]
            plan["dil"].append({"order": order, "taps": taps, "used": used,
                                "groups": [(j, int(bounds[j]), int(bounds[j + 1])) for j in range(len(used))]})
    else:
        width = params.length + 8 * int(params.dilations.max())        # zero-padded series
        for di in range(len(params.dilations)):
            d = int(params.dilations[di])
            first = 4 * int(params.dilations.max()) - 4 * d             # the first tap of position 0
            mask = params.channel_mask[di] > 0
            size = mask.sum(axis=1)
            pad = params.padded(di)
            order = np.lexsort((-size, ~pad))
            n_pad = int(pad.sum())
            # slot s: the s-th channel of each kernel, in channel order (the order ``_conv`` adds them)
            slots = []
            for sl in range(int(size.max())):
                for a, z in ((0, n_pad), (n_pad, N_KERNELS)):
                    ks = order[a:z][size[order[a:z]] > sl]
                    if len(ks):
                        chans = np.array([np.flatnonzero(mask[k])[sl] for k in ks])
                        taps = [(chans * width + first + beta[ks, i] * d)[:, None] + np.arange(params.length)
                                for i in range(3)]
                        slots.append((sl, a, a + len(ks), chans, taps))
            plan["dil"].append({"order": order, "slots": slots, "n_padded": n_pad})
    return plan


def _count_positive(conv: np.ndarray, biases: np.ndarray, out: np.ndarray) -> None:
    """out (m, kernels, f) = number of positions where conv (m, kernels, P) > biases (kernels, f)."""
    p = conv.shape[-1]
    dtype = np.uint8 if p < 256 else np.uint16 if p < 65536 else np.int64
    step = max(1, 1_000_000 // max(1, conv.shape[1] * biases.shape[1] * p))
    buffer = np.empty((min(step, conv.shape[0]), conv.shape[1], biases.shape[1], p), dtype=bool)
    for a in range(0, conv.shape[0], step):
        positive = buffer[:min(step, conv.shape[0] - a)]
        np.greater(conv[a:a + step, :, None, :], biases[None, :, :, None], out=positive)
        out[a:a + step] = positive.view(np.uint8).sum(axis=-1, dtype=dtype)


def _batch_features(params: MiniRocketParams, plan: dict, x: np.ndarray, out: np.ndarray) -> None:
    """Features of the cases x (mb, channels, length) into out (mb, n_features)."""
    mb, n_ch, n = x.shape
    beta, offs = plan["beta"], plan["offs"]
    rows = np.arange(mb)[:, None]
    if params.edges == "valid":
        # channel-subset series, summed in channel order as ``_conv_summed`` does: (mb, U, n)
        sub = plan["subsets"]
        ys = sub[None, :, 0, None] * x[:, None, 0]
        for c in range(1, n_ch):
            ys = ys + sub[None, :, c, None] * x[:, None, c]
    else:
        taps_max = 4 * int(params.dilations.max())
        xp = np.zeros((mb, n_ch, n + 2 * taps_max))
        xp[:, :, taps_max:taps_max + n] = x
    for di, d in enumerate(params.dilations):
        d = int(d)
        f = int(params.features_per_kernel[di])
        info = plan["dil"][di]
        order = info["order"]
        b = params.biases[offs[di]:offs[di + 1]].reshape(N_KERNELS, f)[order]
        counts = np.empty((mb, N_KERNELS, f), dtype=float)         # kernels in ``order``
        if params.edges == "valid":
            p = n - 8 * d
            sub = ys[:, info["used"]]                                   # (mb, used subsets, n)
            alpha = sub[:, :, 0:p]
            for k in range(1, KERNEL_LENGTH):
                alpha = alpha + sub[:, :, k * d:k * d + p]
            flat = ys.reshape(mb, -1)
            t0, t1, t2 = info["taps"]
            # (mb, 84, P), in place from here: the same operations in the same order as
            # ``_conv_summed`` ("clip": indices are in range, and it avoids a buffered copy)
            conv = np.take(flat, t0, axis=1, mode="clip")
            tmp = np.take(flat, t1, axis=1, mode="clip")
            conv += tmp
            conv += np.take(flat, t2, axis=1, out=tmp, mode="clip")
            conv *= 3.0
            for j, a, z in info["groups"]:
                conv[:, a:z] -= alpha[:, j, None]
            _count_positive(conv, b, counts)
            counts /= float(p)
        else:
            s0 = taps_max - 4 * d
            alpha = xp[:, :, s0:s0 + n]
            for k in range(1, KERNEL_LENGTH):
                alpha = alpha + xp[:, :, s0 + k * d:s0 + k * d + n]    # (mb, ch, n)
            flat = xp.reshape(mb, -1)
            conv = np.empty((mb, N_KERNELS, n))
            for sl, a, z, chans, (t0, t1, t2) in info["slots"]:
                # (mb, z − a, n), in place in ``_conv``'s order
                per_channel = np.take(flat, t0, axis=1, mode="clip")
                tmp = np.take(flat, t1, axis=1, mode="clip")
                per_channel += tmp
                per_channel += np.take(flat, t2, axis=1, out=tmp, mode="clip")
                per_channel *= 3.0
                per_channel -= np.take(alpha, chans, axis=1, out=tmp, mode="clip")
                if sl == 0:
                    conv[:, a:z] = per_channel
                else:
                    conv[:, a:z] += per_channel
            n_pad = info["n_padded"]
            if n_pad:
                _count_positive(conv[:, :n_pad], b[:n_pad], counts[:, :n_pad])
                counts[:, :n_pad] /= float(n)
            if n_pad < N_KERNELS:
                _count_positive(conv[:, n_pad:, 4 * d:n - 4 * d], b[n_pad:], counts[:, n_pad:])
                counts[:, n_pad:] /= float(n - 8 * d)
        done = np.empty_like(counts)
        done[:, order] = counts
        out[:, offs[di]:offs[di + 1]] = done.reshape(mb, N_KERNELS * f)


def reference_transform(params: MiniRocketParams, x: np.ndarray, chunk: int = 32) -> np.ndarray:
    """``minirocket_transform`` the plain way (``_conv`` or ``_conv_summed`` on zero-padded
    taps, one dilation at a time): the reference the faster path is tested against."""
    x = np.asarray(x, dtype=float)
    m, n_ch, n = x.shape
    if n != params.length or n_ch != params.n_channels:
        raise ValueError(f"cases are {n_ch}×{n}; the transform was fitted to {params.n_channels}×{params.length}")
    beta = kernel_positions()
    convolve = _conv_summed if params.edges == "valid" else _conv
    out = np.empty((m, params.n_features))
    offs = params.offsets()
    for a in range(0, m, chunk):
        xb = x[a:a + chunk]
        for di, d in enumerate(params.dilations):
            d = int(d)
            f = int(params.features_per_kernel[di])
            b = params.biases[offs[di]:offs[di + 1]].reshape(N_KERNELS, f)
            conv = convolve(_padded_taps(xb, d), params.channel_mask[di], beta)   # (84, mb, n)
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
    samples seen, the running counts (n_features, 9 bands) of positive
    convolution-minus-bias values, and a store of the convolution outputs (84 kernels)
    of every position now inside each band of each dilation (one slot per position:
    a band of b positions keeps its values in b slots, indexed by position mod b).
    ``push`` takes a block (n, channels) and returns the features (hops, n_features) of
    each window completed and the count of samples seen at each window's end, like
    ``Windower.push``.

    Per hop, only the positions entering a band are convolved (in one batch over all
    dilations; their offsets from the window start are the same every hop, so they are
    worked out once) and stored; those leaving a band take their stored outputs. Both
    are compared with each dilation's biases: work proportional to the hop.
    """

    def __init__(self, params: MiniRocketParams, hop: int):
        if params.edges != "alternate":
            raise ValueError(f"RollingMiniRocket follows the alternating padding; for edges={params.edges!r} "
                             "use rolling_transform(params, hop)")
        self.params = params
        self.hop = int(hop)
        self.ring_len = params.length + self.hop
        self.ring = np.zeros((params.n_channels, self.ring_len))
        self.seen = 0
        self.counts = np.zeros((params.n_features, 9))
        self.beta = kernel_positions()
        self.band_taps = _band_taps()
        self.layouts = [_band_layout(params.length, int(d)) for d in params.dilations]
        self.stored = np.zeros((len(params.dilations) * params.length, N_KERNELS))  # slot → 84 outputs
        self.window_start = None
        offs = params.offsets()
        self.offs = offs
        n = params.length
        self.f_padded = np.concatenate([np.repeat(params.padded(di), int(f)) for di, f in enumerate(params.features_per_kernel)])
        self.f_interior = np.concatenate([np.full(N_KERNELS * int(f), float(n - 8 * int(d)))
                                          for d, f in zip(params.dilations, params.features_per_kernel)])
        self.bias_blocks = [params.biases[offs[di]:offs[di + 1]].reshape(N_KERNELS, int(f))
                            for di, f in enumerate(params.features_per_kernel)]
        self.steady = self._moves(0, self.hop)   # a move by one hop from a window starting at 0

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
            a = self.seen % self.ring_len
            if a + take <= self.ring_len:
                self.ring[:, a:a + take] = block[i:i + take].T
            else:
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

    def _moves(self, prev: int | None, start: int) -> dict:
        """Positions entering and leaving each band when the window moves from ``prev`` to
        ``start`` (None: the first window), for all dilations.

        Returns the entering positions with their taps, channel masks and store slots
        (as offsets when ``prev`` is given: the move is the same from any start), the
        leaving positions' slots, and per dilation the order that groups entering and
        leaving positions of that dilation together with a (positions, 9 bands) matrix of
        +1 (entering) / −1 (leaving).
        """
        n = self.params.length
        e_pos, e_band, e_di, l_pos, l_band, l_di = [], [], [], [], [], []
        for di, d in enumerate(self.params.dilations):
            rel, lens = self.layouts[di]
            for bi in range(9):
                a_new, b_new = start + rel[bi], start + rel[bi] + lens[bi]
                if prev is None:
                    enter, leave = np.arange(a_new, b_new), np.empty(0, dtype=np.int64)
                else:
                    a_old, b_old = prev + rel[bi], prev + rel[bi] + lens[bi]
                    enter = np.arange(max(a_new, b_old), b_new)
                    leave = np.arange(a_old, min(b_old, a_new))
                e_pos.append(enter); e_band.append(np.full(len(enter), bi)); e_di.append(np.full(len(enter), di))
                l_pos.append(leave); l_band.append(np.full(len(leave), bi)); l_di.append(np.full(len(leave), di))
        cat = lambda xs: np.concatenate(xs).astype(np.int64)
        e_pos, e_band, e_di, l_pos, l_band, l_di = map(cat, (e_pos, e_band, e_di, l_pos, l_band, l_di))
        # Entering positions in three groups: interior (all kernels), edges at even and at
        # odd dilation index (only the zero-padded kernels, every other one, read the
        # edge bands' counts; see ``MiniRocketParams.padded``).
        group = np.where(e_band == 4, 0, 1 + e_di % 2)
        first = np.argsort(group, kind="stable")
        e_pos, e_band, e_di, group = e_pos[first], e_band[first], e_di[first], group[first]
        groups = np.concatenate([[0], np.cumsum(np.bincount(group, minlength=3))])
        slot_start = np.array([[di * n + int(np.sum(self.layouts[di][1][:bi])) for bi in range(9)]
                               for di in range(len(self.params.dilations))])
        band_len = np.array([self.layouts[di][1] for di in range(len(self.params.dilations))])
        d_e = self.params.dilations[e_di].astype(np.int64)
        # all positions, entering first, regrouped by dilation for the comparisons
        di_all = np.concatenate([e_di, l_di])
        band_all = np.concatenate([e_band, l_band])
        sign_all = np.concatenate([np.ones(len(e_di)), -np.ones(len(l_di))])
        order = np.argsort(di_all, kind="stable")
        seg = np.concatenate([[0], np.cumsum(np.bincount(di_all, minlength=len(self.params.dilations)))])
        weights = []
        for di in range(len(self.params.dilations)):
            sel = order[seg[di]:seg[di + 1]]
            w = np.zeros((len(sel), 9))
            w[np.arange(len(sel)), band_all[sel]] = sign_all[sel]
            weights.append(w)
        base = 0 if prev is None else prev
        return {"pos": e_pos - base, "tap_offset": (np.arange(KERNEL_LENGTH)[:, None] - 4) * d_e[None, :],
                "inside": np.ascontiguousarray(self.band_taps[e_band].T),
                "mask": np.ascontiguousarray(self.params.channel_mask[e_di].transpose(1, 2, 0)),
                "e_slot_start": slot_start[e_di, e_band], "e_len": band_len[e_di, e_band],
                "l_pos": l_pos - base, "l_slot_start": slot_start[l_di, l_band], "l_len": band_len[l_di, l_band],
                "order": order, "seg": seg, "weights": weights, "groups": groups}

    def _advance(self, start: int) -> np.ndarray:
        """Move the window to [start, start + length) and return its features."""
        prev = self.window_start
        steady = prev is not None and start - prev == self.hop
        mv = self.steady if steady else self._moves(prev, start)
        self._count(mv, 0 if prev is None else prev)
        n = self.params.length
        c = self.counts
        self.window_start = start
        return np.where(self.f_padded, c.sum(axis=1) / float(n), c[:, 4] / self.f_interior)

    def _count(self, mv: dict, base: int) -> None:
        """Add +1 × (convolution > bias) at the positions entering each band and −1 × the
        same at those leaving it.

        Entering positions are convolved following ``_conv``'s order of additions exactly
        (with a channel mask per position), so the counts match the batch transform bit
        for bit; their outputs are stored for when they leave.
        """
        pos = mv["pos"] + base
        l_slots = mv["l_slot_start"] + (mv["l_pos"] + base) % mv["l_len"]
        leaving = self.stored[l_slots].T                                          # (84, leaving)
        entering = np.zeros((N_KERNELS, len(pos)))
        if len(pos):
            tap_pos = pos[None, :] + mv["tap_offset"]                                   # (9, P)
            vals = self.ring.T[tap_pos % self.ring_len]                                 # (9, P, ch)
            taps = np.ascontiguousarray(np.where(mv["inside"][:, :, None], vals, 0.0).transpose(0, 2, 1))  # (9, ch, P)
            g = mv["groups"]
            for kernels, a, z in ((slice(None), g[0], g[1]), (slice(0, None, 2), g[1], g[2]),
                                  (slice(1, None, 2), g[2], g[3])):
                if z > a:
                    entering[kernels, a:z] = self._convolve(taps[:, :, a:z], mv["mask"][kernels, :, a:z],
                                                            self.beta[kernels])
            self.stored[mv["e_slot_start"] + pos % mv["e_len"]] = entering.T
        conv = np.concatenate([entering, leaving], axis=1)[:, mv["order"]]
        seg = mv["seg"]
        for di, b in enumerate(self.bias_blocks):
            a, z = seg[di], seg[di + 1]
            if z == a:
                continue
            positive = (conv[:, None, a:z] > b[:, :, None]).reshape(-1, z - a).astype(float)
            self.counts[self.offs[di]:self.offs[di + 1]] += positive @ mv["weights"][di]

    @staticmethod
    def _convolve(taps: np.ndarray, mask: np.ndarray, beta: np.ndarray) -> np.ndarray:
        """``_conv`` with a channel mask per position: taps (9, ch, P), mask (kernels, ch, P),
        beta (kernels, 3). Same order of additions, so bit-equal outputs."""
        alpha = taps[0]
        for k in range(1, KERNEL_LENGTH):
            alpha = alpha + taps[k]
        gamma = taps[beta[:, 0]] + taps[beta[:, 1]]
        gamma = gamma + taps[beta[:, 2]]
        per_channel = 3.0 * gamma - alpha[None]                                     # (kernels, ch, P)
        out = mask[:, 0] * per_channel[:, 0]
        for ch in range(1, taps.shape[1]):
            out = out + mask[:, ch] * per_channel[:, ch]
        return out


# --- rolling transform, valid edges ------------------------------------------------------
#
# With valid edges the feature of a kernel/dilation pair (dilation d) in the window
# [e − n, e) counts (convolution > bias) over the positions [e − n + 4d, e − 4d). Index
# positions by the *step* at which they become computable, u = position + 4d (the sample
# that brings their last tap): the window's range is then the last R = n − 8d steps
# before e, whatever the dilation, and every sample adds one position per dilation. A
# running total per feature of positive outcomes, kept for the last steps, gives each
# window's count as the difference of two totals, R steps apart.


class RollingValidMiniRocket:
    """Valid-edge MiniRocket features of the latest window of a stream, updated per hop.

    State: the channel-subset sums of the last 8·(largest dilation) samples already
    processed (the taps that new positions still need), samples waiting for the next
    window end, and a ring of running totals (steps × features) of positive outcomes
    (convolution > bias) over the last steps. ``push`` takes a block (n, channels) and returns the features (hops,
    n_features) of each window completed and the count of samples seen at each window's
    end, like ``Windower.push``.

    Samples are processed only when a window end is reached (one-sample blocks cost no
    more than hop-sized ones), all dilations and all new steps at once: a long block is
    processed in one go, in pieces of at most ``max_steps`` samples to bound memory. The
    convolution follows ``_conv_summed``'s order of additions, so the features are
    bit-equal to ``minirocket_transform`` of the same windows.
    """

    def __init__(self, params: MiniRocketParams, hop: int, max_steps: int | None = None):
        if params.edges != "valid":
            raise ValueError(f"RollingValidMiniRocket needs edges='valid', not {params.edges!r}")
        if hop < 1:
            raise ValueError(f"hop must be at least one sample, not {hop}")
        self.params = params
        self.hop = int(hop)
        n, n_ch, n_feat = params.length, params.n_channels, params.n_features
        dil = params.dilations.astype(np.int64)
        n_dil = len(dil)
        beta = kernel_positions()
        self.history_len = 8 * int(dil.max())                      # how far back new positions' taps reach
        # Series per distinct channel subset (over all dilations); rows (dilation, kernel).
        subsets, which = np.unique(params.channel_mask.reshape(-1, n_ch), axis=0, return_inverse=True)
        self.subsets = subsets[:, :, None]                          # (U, ch, 1)
        row_u = which.ravel()
        row_d = np.repeat(dil, N_KERNELS)
        row_k = np.tile(np.arange(N_KERNELS), n_dil)
        first = self.history_len - 8 * row_d                        # column of the first tap of step 0
        self.row_u = row_u
        self.gamma_cols = [first + beta[row_k, i] * row_d for i in range(3)]
        pairs, self.row_pair = np.unique(np.stack([row_u, np.repeat(np.arange(n_dil), N_KERNELS)], axis=1),
                                         axis=0, return_inverse=True)
        self.row_pair = self.row_pair.ravel()
        self.pair_u = pairs[:, 0]
        pair_first = self.history_len - 8 * dil[pairs[:, 1]]
        self.alpha_cols = [pair_first + k * dil[pairs[:, 1]] for k in range(KERNEL_LENGTH)]
        fpk = params.features_per_kernel.astype(np.int64)
        self.row_of_feature = np.repeat(np.arange(n_dil * N_KERNELS), np.repeat(fpk, N_KERNELS))
        self.range_len = n - 8 * row_d[self.row_of_feature]        # R per feature, ≥ 1
        offs = params.offsets()
        self.columns = [(int(offs[di]), int(offs[di + 1])) for di in range(n_dil)]     # features per dilation
        self.conv_rows = [(di * N_KERNELS, (di + 1) * N_KERNELS) for di in range(n_dil)]
        self.bias_blocks = [params.biases[a:z].reshape(N_KERNELS, -1) for a, z in self.columns]
        self.dilation_range = [n - 8 * int(d) for d in dil]
        self.n_features = n_feat
        self.max_steps = int(max_steps) if max_steps else max(1, min(512, 2_000_000 // max(n_feat, 1)))
        self.ring_len = int(self.range_len.max()) + self.max_steps
        # Step s in row s mod ring_len. Unsigned 32-bit totals wrap after 2^32 positives, but a
        # window's count is a difference of two totals at most n steps apart, and unsigned
        # differences are exact modulo 2^32: right for ever, at half the memory of int64.
        self.totals = np.zeros((self.ring_len, n_feat), dtype=np.uint32)
        self.history = np.zeros((len(subsets), self.history_len))  # subset sums of the last samples
        self.done = 0                                              # samples processed (= steps)
        self.waiting: list[np.ndarray] = []
        self.n_waiting = 0

    def _first_end_after(self, seen: int) -> int:
        n = self.params.length
        if seen < n:
            return n
        return seen + self.hop - ((seen - n) % self.hop)

    def push(self, block: np.ndarray) -> tuple[np.ndarray, list[int]]:
        block = np.asarray(block, dtype=float)
        if block.ndim != 2 or block.shape[1] != self.params.n_channels:
            raise ValueError(f"block has shape {block.shape}; expected (n, {self.params.n_channels})")
        if block.shape[0]:
            self.waiting.append(block)
            self.n_waiting += block.shape[0]
        seen = self.done + self.n_waiting
        first = self._first_end_after(self.done)
        if seen < first:
            return np.empty((0, self.params.n_features)), []
        ends = np.arange(first, seen + 1, self.hop)
        x = np.concatenate(self.waiting) if len(self.waiting) > 1 else self.waiting[0]
        upto = int(ends[-1]) - self.done                            # samples to process now
        self.waiting = [x[upto:]] if upto < x.shape[0] else []
        self.n_waiting = x.shape[0] - upto
        out = np.empty((len(ends), self.params.n_features))
        for a in range(0, upto, self.max_steps):
            z = min(upto, a + self.max_steps)
            lo, hi = np.searchsorted(ends, [self.done, self.done + (z - a)], side="right")
            out[lo:hi] = self._steps(x[a:z].T, ends[lo:hi] - 1)
        return out, [int(e) for e in ends]

    def _steps(self, x: np.ndarray, emit_steps: np.ndarray) -> np.ndarray:
        """Process samples x (channels, B) (steps done … done + B − 1); the features
        (len(emit_steps), n_features) of the windows ending after the given steps."""
        b = x.shape[1]
        ys = self.subsets[:, 0] * x[0]                                          # (U, B): per-sample sums,
        for c in range(1, x.shape[0]):                                          # kept so each sample is
            ys = ys + self.subsets[:, c] * x[c]                                 # summed once
        ys = np.concatenate([self.history, ys], axis=1)                         # (U, H + B)
        # view[u, col, j] = ys[u, col + j]: step j's taps are step 0's columns shifted by j
        u_n, cols = ys.shape
        view = np.ndarray((u_n, cols - b + 1, b), ys.dtype, ys, 0, (ys.strides[0], ys.strides[1], ys.strides[1]))
        alpha = view[self.pair_u, self.alpha_cols[0]]                           # (pairs, B)
        for k in range(1, KERNEL_LENGTH):
            alpha = alpha + view[self.pair_u, self.alpha_cols[k]]
        gamma = view[self.row_u, self.gamma_cols[0]] + view[self.row_u, self.gamma_cols[1]]
        gamma = gamma + view[self.row_u, self.gamma_cols[2]]                    # (rows, B)
        conv = (3.0 * gamma - alpha[self.row_pair]).T                           # (B, rows)
        positive = np.empty((b, self.n_features), dtype=bool)
        for (a, z), (ra, rz), biases in zip(self.columns, self.conv_rows, self.bias_blocks):
            positive[:, a:z] = (conv[:, ra:rz, None] > biases).reshape(b, z - a)  # features (kernel, bias)
        ring, t = self.totals, self.ring_len
        for j in range(b):  # running totals, one step a row (a row-wise loop beats cumsum down columns)
            np.add(ring[(self.done + j - 1) % t], positive[j], out=ring[(self.done + j) % t])
        counts = ring[emit_steps % t]                                           # (hops, features), mod 2^32
        for (a, z), r in zip(self.columns, self.dilation_range):
            counts[:, a:z] -= ring[(emit_steps - r) % t, a:z]
        self.history = ys[:, b:]
        self.done += b
        return counts / self.range_len


def rolling_transform(params: MiniRocketParams, hop: int):
    """The rolling transform for ``params``' edge mode: ``push(block) -> (features, ends)``."""
    if params.edges == "valid":
        return RollingValidMiniRocket(params, hop)
    return RollingMiniRocket(params, hop)
