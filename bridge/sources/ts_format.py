"""Reader for the `.ts` time-series classification format of the UCR and UEA archives.

A file is a header of ``@key value`` lines, then ``@data`` and one case per line::

    # comment
    @problemName Example
    @univariate false
    @dimensions 2
    @equalLength true
    @seriesLength 4
    @classLabel true walk run
    @data
    1,2,3,4:0.5,0.5,?,1:walk

Within a case, dimensions are separated by ``:`` and values by ``,``; with ``@classLabel
true`` the last ``:`` field is the label, which must be one of the declared labels. ``?``
marks a missing value. Time-stamped series (``@timeStamps true``) are not read.

``read_ts`` returns cases as (channels, length) float arrays in file order; values carry
whatever unit the archive gave (the archives' series are mostly z-normalised, unitless).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

MAX_CHANNELS = 10_000
MAX_LENGTH = 10_000_000


class TsFormatError(ValueError):
    """A `.ts` file that cannot be read, naming the file and line."""


def _bool(value: str, where: str) -> bool:
    v = value.strip().lower()
    if v in ("true", "false"):
        return v == "true"
    raise TsFormatError(f"{where}: expected true or false, got {value!r}")


def interpolate_missing(x: np.ndarray) -> np.ndarray:
    """Fill NaN samples of each channel of x (channels, length) by linear interpolation.

    Leading and trailing gaps take the nearest present value. A channel with no value at
    all raises ValueError.
    """
    x = np.array(x, dtype=float, copy=True)
    t = np.arange(x.shape[1])
    for c in range(x.shape[0]):
        bad = np.isnan(x[c])
        if bad.all():
            raise ValueError(f"channel {c} has no values at all")
        if bad.any():
            x[c, bad] = np.interp(t[bad], t[~bad], x[c, ~bad])
    return x


def read_ts(path: str | Path, missing: str = "refuse") -> tuple[list[np.ndarray], np.ndarray, dict]:
    """Read a `.ts` file.

    missing: what to do with ``?`` values: "refuse" (raise TsFormatError naming the first
    one), "interpolate" (linear in time per channel, see ``interpolate_missing``) or "keep"
    (leave NaN). Returns (X, y, metadata): X a list of (channels, length) float64 arrays,
    y an array of label strings (empty strings when the file has no labels), metadata a
    dict of the header (``problem_name``, ``univariate``, ``dimensions``, ``equal_length``,
    ``series_length``, ``class_labels``, ``missing``, ``comments``).
    """
    if missing not in ("refuse", "interpolate", "keep"):
        raise ValueError(f"missing must be 'refuse', 'interpolate' or 'keep', not {missing!r}")
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise TsFormatError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise TsFormatError(f"{path}: cannot read ({exc})") from None

    if text.startswith("#drape-take"):
        raise TsFormatError(f"{path}: a drape take, not a UCR/UEA .ts case file: leave out --ts")
    meta: dict = {"problem_name": "", "univariate": None, "dimensions": None, "equal_length": None,
                  "series_length": None, "class_labels": None, "missing": None, "timestamps": False,
                  "comments": []}
    in_data = False
    X: list[np.ndarray] = []
    y: list[str] = []
    for no, raw in enumerate(text.splitlines(), start=1):
        where = f"{path}:{no}"
        line = raw.strip()
        if not line:
            continue
        if line.startswith("#"):
            if not in_data:
                meta["comments"].append(line[1:].strip())
            continue
        if not in_data:
            if not line.startswith("@"):
                raise TsFormatError(f"{where}: expected a @key header line or @data before the data")
            key, _, value = line[1:].partition(" ")
            key = key.lower()
            value = value.strip()
            if key == "problemname":
                meta["problem_name"] = value
            elif key == "timestamps":
                meta["timestamps"] = _bool(value, where)
                if meta["timestamps"]:
                    raise TsFormatError(f"{where}: time-stamped series are not supported; "
                                        "resample them to equal spacing and write plain values")
            elif key == "missing":
                meta["missing"] = _bool(value, where)
            elif key == "univariate":
                meta["univariate"] = _bool(value, where)
            elif key == "dimensions":
                try:
                    meta["dimensions"] = int(value)
                except ValueError:
                    raise TsFormatError(f"{where}: @dimensions needs a whole number, got {value!r}") from None
                if not 1 <= meta["dimensions"] <= MAX_CHANNELS:
                    raise TsFormatError(f"{where}: @dimensions must be 1 to {MAX_CHANNELS}")
            elif key == "equallength":
                meta["equal_length"] = _bool(value, where)
            elif key == "serieslength":
                try:
                    meta["series_length"] = int(value)
                except ValueError:
                    raise TsFormatError(f"{where}: @seriesLength needs a whole number, got {value!r}") from None
            elif key == "classlabel":
                parts = value.split()
                if not parts:
                    raise TsFormatError(f"{where}: @classLabel needs true or false")
                if _bool(parts[0], where):
                    if len(parts) < 2:
                        raise TsFormatError(f"{where}: @classLabel true must list the labels")
                    meta["class_labels"] = parts[1:]
                else:
                    meta["class_labels"] = []
            elif key == "targetlabel":
                if _bool(value.split()[0] if value else "", where):
                    raise TsFormatError(f"{where}: regression files (@targetLabel true) are not supported")
            elif key == "data":
                if meta["class_labels"] is None:
                    raise TsFormatError(f"{where}: @data before @classLabel; the header must say whether cases are labelled")
                in_data = True
            else:
                meta.setdefault("other", {})[key] = value
            continue

        fields = line.split(":")
        labelled = bool(meta["class_labels"])
        if labelled:
            if len(fields) < 2:
                raise TsFormatError(f"{where}: case has no class label after ':'")
            label = fields[-1].strip()
            fields = fields[:-1]
            if label not in meta["class_labels"]:
                raise TsFormatError(f"{where}: label {label!r} is not one of those declared: "
                                    f"{' '.join(meta['class_labels'])}")
        else:
            label = ""
        if meta["dimensions"] is not None and len(fields) != meta["dimensions"]:
            raise TsFormatError(f"{where}: case has {len(fields)} dimensions; the header declares {meta['dimensions']}")
        if meta["univariate"] and len(fields) != 1:
            raise TsFormatError(f"{where}: case has {len(fields)} dimensions in a univariate file")
        if len(fields) > MAX_CHANNELS:
            raise TsFormatError(f"{where}: more than {MAX_CHANNELS} dimensions")
        channels = []
        for d, field in enumerate(fields):
            items = field.split(",")
            if len(items) > MAX_LENGTH:
                raise TsFormatError(f"{where}: dimension {d + 1} longer than {MAX_LENGTH} values")
            vals = np.empty(len(items))
            for i, item in enumerate(items):
                s = item.strip()
                if s == "?":
                    if missing == "refuse":
                        raise TsFormatError(f"{where}: missing value '?' in dimension {d + 1} at position {i + 1}; "
                                            "read with missing='interpolate' to fill gaps")
                    vals[i] = np.nan
                    continue
                try:
                    vals[i] = float(s)
                except ValueError:
                    raise TsFormatError(f"{where}: dimension {d + 1} position {i + 1}: {s!r} is not a number") from None
                if not np.isfinite(vals[i]):
                    raise TsFormatError(f"{where}: dimension {d + 1} position {i + 1}: {s!r} is not finite")
            channels.append(vals)
        lengths = {len(c) for c in channels}
        if len(lengths) != 1:
            raise TsFormatError(f"{where}: dimensions of one case differ in length ({sorted(lengths)})")
        case = np.stack(channels)
        if meta["equal_length"] and meta["series_length"] is not None and case.shape[1] != meta["series_length"]:
            raise TsFormatError(f"{where}: case has {case.shape[1]} values; the header declares @seriesLength "
                                f"{meta['series_length']}")
        if X and case.shape[0] != X[0].shape[0]:
            raise TsFormatError(f"{where}: case has {case.shape[0]} dimensions; earlier cases have {X[0].shape[0]}")
        if missing == "interpolate" and np.isnan(case).any():
            try:
                case = interpolate_missing(case)
            except ValueError as exc:
                raise TsFormatError(f"{where}: cannot fill missing values ({exc})") from None
        X.append(case)
        y.append(label)
    if not in_data:
        raise TsFormatError(f"{path}: no @data line: not a .ts file")
    if not X:
        raise TsFormatError(f"{path}: no cases after @data")
    if meta["equal_length"] and len({c.shape[1] for c in X}) > 1:
        raise TsFormatError(f"{path}: @equalLength true but cases differ in length")
    meta["dimensions"] = X[0].shape[0]
    return X, np.array(y, dtype=str), meta


def stack_cases(X: list[np.ndarray], length: int | None = None) -> np.ndarray:
    """Cases of possibly unequal length as one (m, channels, length) array.

    Equal-length cases are stacked as they are. Otherwise each case is resampled by linear
    interpolation to ``length`` samples (default: the longest case's length).
    """
    lengths = [c.shape[1] for c in X]
    if length is None and len(set(lengths)) == 1:
        return np.stack(X).astype(float)
    n = int(length or max(lengths))
    out = np.empty((len(X), X[0].shape[0], n))
    for i, c in enumerate(X):
        t_old = np.linspace(0.0, 1.0, c.shape[1])
        t_new = np.linspace(0.0, 1.0, n)
        for ch in range(c.shape[0]):
            out[i, ch] = np.interp(t_new, t_old, c[ch]) if c.shape[1] > 1 else c[ch, 0]
    return out
