"""A hostile model file cannot run code or make the loader allocate without bound."""

import io
import json
import os
import tracemalloc
import zipfile
from pathlib import Path

import numpy as np
import pytest

from bridge.evaluation.fuzz import _npy, _raw_npy, model_seed_members, zip_members
from bridge.recognition import ModelError, load_model


class _Payload:
    """Unpickling this calls os.system: the classic pickle attack (here: touch a marker file)."""

    def __init__(self, marker: Path):
        self.marker = marker

    def __reduce__(self):
        return (os.system, (f"touch {self.marker}",))


def _pickled_array(marker: Path) -> bytes:
    buf = io.BytesIO()
    np.save(buf, np.array([_Payload(marker), 1], dtype=object), allow_pickle=True)
    return buf.getvalue()


@pytest.fixture(scope="module")
def linear_members():
    return model_seed_members()[0]


def test_the_payload_is_live_when_unpickled(tmp_path):
    # the control: the same bytes loaded the unsafe way do run the command, so the test
    # below would see the marker if the loader ever unpickled anything
    marker = tmp_path / "ran"
    np.load(io.BytesIO(_pickled_array(marker)), allow_pickle=True)
    assert marker.exists()


@pytest.mark.parametrize("member", ["meta_json.npy", "weights.npy", "feature_mean.npy", "bias.npy"])
def test_pickled_object_array_is_refused_and_never_run(tmp_path, linear_members, member):
    marker = tmp_path / "ran"
    members = dict(linear_members)
    members[member] = _pickled_array(marker)
    path = tmp_path / "evil.npz"
    path.write_bytes(zip_members(members))
    with pytest.raises(ModelError, match="Python objects|not a drape model"):
        load_model(path)
    assert not marker.exists()


def test_a_pickle_disguised_as_a_model_is_refused(tmp_path):
    import pickle  # only to craft the attack: the package never imports it (test_security)
    marker = tmp_path / "ran"
    path = tmp_path / "model.npz"
    path.write_bytes(pickle.dumps(_Payload(marker)))
    with pytest.raises(ModelError, match="not a drape model"):
        load_model(path)
    assert not marker.exists()


def test_huge_declared_array_is_refused_before_reading(tmp_path, linear_members):
    # 10^12 float64 values would be 8 TB: refused from the header, nothing read or allocated
    members = dict(linear_members)
    members["weights.npy"] = _raw_npy("{'descr': '<f8', 'fortran_order': False, 'shape': (1000000, 1000000), }")
    path = tmp_path / "huge.npz"
    path.write_bytes(zip_members(members))
    tracemalloc.start()
    try:
        with pytest.raises(ModelError, match="weights has shape"):
            load_model(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 20 * 2 ** 20


def test_metadata_that_is_huge_or_deep_is_refused(tmp_path, linear_members):
    cases = {
        "deep": b"[" * 200_000 + b"]" * 200_000,
        "deep_object": b'{"a":' * 100_000 + b"1" + b"}" * 100_000,
        "too_long": b" " * 1_000_001 + b"{}",
    }
    for name, raw in cases.items():
        members = dict(linear_members)
        members["meta_json.npy"] = _npy(np.frombuffer(raw, dtype=np.uint8))
        path = tmp_path / f"{name}.npz"
        path.write_bytes(zip_members(members))
        with pytest.raises(ModelError):
            load_model(path)


def test_metadata_tricks_are_refused(tmp_path, linear_members):
    meta = json.loads(np.lib.format.read_array(io.BytesIO(linear_members["meta_json.npy"])).tobytes())
    tricks = [
        {"temperature": 10 ** 400},                          # a number no float holds
        {"temperature": float("nan")},                       # NaN written as a JSON literal
        {"windows": {"rate_hz": 100.0, "window_s": 1e308, "hop_s": 0.1}},
        {"windows": {"rate_hz": 100.0, "window_s": 2.0, "hop_s": float("inf")}},
        {"conditioning": {**meta["conditioning"], "high_hz": 2147483648.0}},   # no filter can be designed
        {"conditioning": {**meta["conditioning"], "order": 10 ** 6}},
        {"classes": ["null"] + [f"c{i}" for i in range(10_000)]},
        {"channels": ["c"] * 100_000},
        {"conditioning": "__import__('os').system('true')"},
        {"classifier": "__class__"},
        {"format": "drape-model", "version": True},
    ]
    for i, change in enumerate(tricks):
        members = dict(linear_members)
        members["meta_json.npy"] = _npy(np.frombuffer(json.dumps({**meta, **change}).encode(), dtype=np.uint8))
        path = tmp_path / f"trick{i}.npz"
        path.write_bytes(zip_members(members))
        with pytest.raises(ModelError):
            load_model(path)


def test_hostile_npy_headers_are_refused(tmp_path, linear_members):
    headers = [
        "{'descr': __import__('os').system('touch %s'), 'fortran_order': False, 'shape': (2,), }",
        "{'descr': '<f8', 'fortran_order': False, 'shape': (" + "(" * 400 + ")}",
        "{'descr': 'O', 'fortran_order': False, 'shape': (4,), }",
        "{'descr': [('a', '<f8')] * 100, 'fortran_order': False, 'shape': (4,), }",
    ]
    marker = tmp_path / "ran"
    for i, h in enumerate(headers):
        members = dict(linear_members)
        members["feature_mean.npy"] = _raw_npy(h.replace("%s", str(marker)) if "%s" in h else h, b"\0" * 64)
        path = tmp_path / f"h{i}.npz"
        path.write_bytes(zip_members(members))
        with pytest.raises(ModelError):
            load_model(path)
    assert not marker.exists()


def test_unsupported_compression_and_corrupt_deflate_are_refused(tmp_path, linear_members):
    path = tmp_path / "deflated.npz"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as z:
        for name, data in linear_members.items():
            z.writestr(name, data)
    raw = bytearray(path.read_bytes())
    start = raw.index(b"meta_json.npy") + len(b"meta_json.npy")
    raw[start + 5:start + 40] = bytes(35)  # damage the deflate stream of the first member
    path.write_bytes(bytes(raw))
    with pytest.raises(ModelError):
        load_model(path)
    raw = bytearray(zip_members(linear_members))
    raw[8:10] = (99).to_bytes(2, "little")  # compression method 99 (AES): not supported
    i = raw.index(b"PK\x01\x02")
    raw[i + 10:i + 12] = (99).to_bytes(2, "little")
    path.write_bytes(bytes(raw))
    with pytest.raises(ModelError):
        load_model(path)


def test_encrypted_member_is_refused(tmp_path, linear_members):
    # found by the long fuzz run: the zip "encrypted" flag made zipfile raise RuntimeError
    raw = bytearray(zip_members(linear_members))
    raw[6] |= 1                       # local header: general purpose flag bit 0
    i = raw.index(b"PK\x01\x02")
    raw[i + 8] |= 1                   # central directory: the same flag
    path = tmp_path / "locked.npz"
    path.write_bytes(bytes(raw))
    with pytest.raises(ModelError):
        load_model(path)



def test_finite_but_enormous_weights_are_refused(tmp_path, linear_members):
    # 1e300 is finite, but a score built from it overflows to inf and NaN at run time.
    members = dict(linear_members)
    w = np.lib.format.read_array(io.BytesIO(members["weights.npy"]))
    w.flat[0] = 1e300
    members["weights.npy"] = _npy(w)
    path = tmp_path / "huge.npz"
    path.write_bytes(zip_members(members))
    with pytest.raises(ModelError, match="beyond"):
        load_model(path)


@pytest.mark.parametrize("scale", [10 ** 400, 2 ** 64, -1, 0, float("inf")])
def test_a_dtw_null_scale_no_float_holds_is_refused_as_a_model_error(tmp_path, scale):
    # found by the property fuzzer: an integer too large for a float (or for numpy's int64)
    # made the loader raise TypeError or OverflowError instead of ModelError
    members = dict(next(m for m in model_seed_members()
                        if b'"dtw"' in np.lib.format.read_array(io.BytesIO(m["meta_json.npy"])).tobytes()))
    meta = json.loads(np.lib.format.read_array(io.BytesIO(members["meta_json.npy"])).tobytes())
    members["meta_json.npy"] = _npy(np.frombuffer(json.dumps({**meta, "null_scale": scale}).encode(), dtype=np.uint8))
    path = tmp_path / "scale.npz"
    path.write_bytes(zip_members(members))
    if scale == 2 ** 64:      # a large but ordinary number: loads
        assert load_model(path).null_scale == float(2 ** 64)
    else:
        with pytest.raises(ModelError, match="null_scale"):
            load_model(path)
