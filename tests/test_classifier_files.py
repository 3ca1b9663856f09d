"""Model files of every classifier: round trips, and hostile or damaged files refused cheaply."""

import io
import json
import zipfile

import numpy as np
import pytest

from bridge.recognition import ModelError, load_model
from bridge.recognition.classifiers import fit_cases, make_recogniser, predict_proba

rng = np.random.default_rng(0)
X = rng.normal(size=(12, 2, 40)).cumsum(axis=2)
Y = np.repeat(["a", "b", "c"], 4)
OPTIONS = {"linear": {}, "minirocket": {"n_features": 840}, "dtw": {"band": 0.2}}


@pytest.fixture(scope="module", params=["linear", "minirocket", "dtw"])
def model(request):
    return fit_cases(request.param, X, Y, ["a", "b", "c"], rate_hz=20.0, **OPTIONS[request.param])


def arrays_of(path):
    with np.load(path, allow_pickle=False) as z:
        return {k: z[k] for k in z.files}


def test_round_trip_predicts_the_same(model, tmp_path):
    loaded = load_model(model.save(tmp_path / "m.npz"))
    assert type(loaded) is type(model) and loaded.classifier == model.classifier
    assert loaded.classes == model.classes and loaded.temperature == model.temperature
    np.testing.assert_array_equal(predict_proba(loaded, X), predict_proba(model, X))
    assert type(make_recogniser(loaded)) is type(make_recogniser(model))


def test_every_array_is_checked(model, tmp_path):
    path = model.save(tmp_path / "m.npz")
    arrays = arrays_of(path)
    for name in arrays:
        if name == "meta_json":
            continue
        bad = dict(arrays)
        bad[name] = np.zeros(bad[name].shape + (2,), dtype=bad[name].dtype)
        np.savez(tmp_path / "bad.npz", **bad)
        with pytest.raises(ModelError, match=name):
            load_model(tmp_path / "bad.npz")
        bad[name] = arrays[name].astype(np.complex128)
        np.savez(tmp_path / "bad.npz", **bad)
        with pytest.raises(ModelError, match=name):
            load_model(tmp_path / "bad.npz")


def set_meta(path, out, **changes):
    arrays = arrays_of(path)
    meta = json.loads(arrays["meta_json"].tobytes())
    meta.update(changes)
    arrays["meta_json"] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    np.savez(out, **arrays)
    return out


def test_unknown_classifier_refused(model, tmp_path):
    path = set_meta(model.save(tmp_path / "m.npz"), tmp_path / "x.npz", classifier="oracle")
    with pytest.raises(ModelError, match="unknown classifier 'oracle'"):
        load_model(path)


def test_metadata_counts_beyond_limits_refused(tmp_path):
    m = fit_cases("dtw", X, Y, ["a", "b", "c"], rate_hz=20.0)
    path = m.save(tmp_path / "m.npz")
    with pytest.raises(ModelError, match="n_templates"):
        load_model(set_meta(path, tmp_path / "x.npz", n_templates=10 ** 9))
    with pytest.raises(ModelError, match="input_channels"):
        load_model(set_meta(path, tmp_path / "x.npz", input_channels=3))
    with pytest.raises(ModelError, match="radius"):
        load_model(set_meta(path, tmp_path / "x.npz", radius=400))


def test_huge_declared_array_is_refused_before_reading(tmp_path):
    # A member whose .npy header claims 10^12 values but holds a few bytes: the header is
    # compared with the expected shape first, so nothing is allocated.
    m = fit_cases("dtw", X, Y, ["a", "b", "c"], rate_hz=20.0)
    path = m.save(tmp_path / "m.npz")
    arrays = arrays_of(path)
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, {"descr": "<f8", "fortran_order": False, "shape": (10 ** 6, 10 ** 6)})
    with zipfile.ZipFile(tmp_path / "huge.npz", "w") as z:
        for name, a in arrays.items():
            if name == "templates":
                z.writestr("templates.npy", buf.getvalue() + b"\0" * 64)
            else:
                b = io.BytesIO()
                np.lib.format.write_array(b, a)
                z.writestr(name + ".npy", b.getvalue())
    with pytest.raises(ModelError, match="templates has shape"):
        load_model(tmp_path / "huge.npz")


def test_channel_mask_must_be_zero_one(tmp_path):
    m = fit_cases("minirocket", X, Y, ["a", "b", "c"], rate_hz=20.0, n_features=840)
    arrays = arrays_of(m.save(tmp_path / "m.npz"))
    arrays["channel_mask"] = arrays["channel_mask"] * 0.5
    np.savez(tmp_path / "x.npz", **arrays)
    with pytest.raises(ModelError, match="channel_mask"):
        load_model(tmp_path / "x.npz")


def test_edge_mode_travels_in_the_file(tmp_path):
    m = fit_cases("minirocket", X, Y, ["a", "b", "c"], rate_hz=20.0, n_features=840, edges="valid")
    path = m.save(tmp_path / "m.npz")
    loaded = load_model(path)
    assert loaded.params.edges == "valid"
    np.testing.assert_array_equal(predict_proba(loaded, X), predict_proba(m, X))
    # A file written before the edge modes has no "edges": it was fitted with the paper's
    # alternating padding, and loads as such.
    arrays = arrays_of(path)
    meta = json.loads(arrays["meta_json"].tobytes())
    del meta["edges"]
    arrays["meta_json"] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    np.savez(tmp_path / "old.npz", **arrays)
    assert load_model(tmp_path / "old.npz").params.edges == "alternate"
    for bad in ("wrapped", 3, None, ["valid"]):
        with pytest.raises(ModelError, match="edges must be one of alternate, valid"):
            load_model(set_meta(path, tmp_path / "x.npz", edges=bad))


def test_object_arrays_refused(model, tmp_path):
    arrays = arrays_of(model.save(tmp_path / "m.npz"))
    name = next(k for k in arrays if k != "meta_json")
    arrays[name] = np.array([{"x": 1}], dtype=object)
    np.savez(tmp_path / "x.npz", **arrays)
    with pytest.raises(ModelError, match="not a drape model"):
        load_model(tmp_path / "x.npz")
