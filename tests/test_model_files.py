"""Model files are .npz arrays plus JSON metadata, never pickle, and are checked on load."""

import json
import zipfile

import numpy as np
import pytest

from bridge.recognition import FEATURES_PER_CHANNEL, Model, ModelError, WindowSpec, load_model
from bridge.signal import BandPass


def tiny_model(n_channels=2):
    d = n_channels * FEATURES_PER_CHANNEL
    rng = np.random.default_rng(0)
    return Model(
        classes=("null", "wave"), kinds={"wave": "gesture"}, channel_names=tuple(f"c{i}" for i in range(n_channels)),
        conditioning=BandPass(100.0), windows=WindowSpec(100.0), feature_mean=rng.normal(size=d),
        feature_scale=np.ones(d), weights=rng.normal(size=(d, 2)), bias=np.zeros(2), temperature=1.5,
        summary={"note": "test"},
    )


def test_round_trip(tmp_path):
    m = tiny_model()
    loaded = load_model(m.save(tmp_path / "m.npz"))
    assert loaded.classes == m.classes and loaded.channel_names == m.channel_names
    np.testing.assert_array_equal(loaded.weights, m.weights)
    assert loaded.temperature == 1.5 and loaded.conditioning == m.conditioning


def test_no_pickle_inside(tmp_path):
    path = tiny_model().save(tmp_path / "m.npz")
    with zipfile.ZipFile(path) as z:
        for name in z.namelist():
            header = z.read(name)[:10]
            assert header.startswith(b"\x93NUMPY")
    with np.load(path, allow_pickle=False) as z:
        assert all(z[k].dtype != object for k in z.files)


def test_pickled_array_is_refused(tmp_path):
    path = tmp_path / "evil.npz"
    np.savez(path, meta_json=np.array([{"a": 1}], dtype=object))
    with pytest.raises(ModelError, match="not a drape model"):
        load_model(path)


def test_garbage_and_missing_files(tmp_path):
    (tmp_path / "junk.npz").write_bytes(b"not a zip at all")
    with pytest.raises(ModelError, match="not a drape model"):
        load_model(tmp_path / "junk.npz")
    with pytest.raises(ModelError, match="no such model file") as missing:
        load_model(tmp_path / "absent.npz")
    # the hint is the fit command as `drape fit --help` spells it (takes are TAKE there)
    assert "`drape fit TAKE... -o absent.npz`" in str(missing.value)


def test_wrong_shapes_and_metadata(tmp_path):
    m = tiny_model()
    path = m.save(tmp_path / "m.npz")
    with np.load(path) as z:
        arrays = {k: z[k] for k in z.files}
    arrays["weights"] = arrays["weights"][:5]
    np.savez(tmp_path / "bad.npz", **arrays)
    with pytest.raises(ModelError, match="weights has shape"):
        load_model(tmp_path / "bad.npz")
    meta = json.loads(arrays["meta_json"].tobytes())
    meta["version"] = 99
    with np.load(path) as z:
        arrays = {k: z[k] for k in z.files}
    arrays["meta_json"] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    np.savez(tmp_path / "v99.npz", **arrays)
    with pytest.raises(ModelError, match="version 99"):
        load_model(tmp_path / "v99.npz")


def test_source_mismatch_is_one_clear_message():
    m = tiny_model(4)
    m.check_source(4, 100.0)
    with pytest.raises(ModelError, match="trained on 4 channels .* the source gives 6"):
        m.check_source(6, 100.0)
    with pytest.raises(ModelError, match="expects 100 Hz samples but the source runs at 50 Hz"):
        m.check_source(4, 50.0)
