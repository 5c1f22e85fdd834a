"""Model files: save/load gives identical predictions; damaged or foreign files raise ModelFileError.

The file is a zip of .npy members (numpy's documented .npz format, numpy.lib.format), read
with numpy.load(allow_pickle=False)."""

import io
import json
import zipfile

import numpy as np
import pytest

from molinv.models import (
    AtomwiseKernelRidgeCV,
    ElementBaseline,
    KernelRidgeCV,
    LinearRidge,
    ModelFileError,
    NystromRidge,
    load_model,
    save_model,
    with_element_counts,
)
from molinv.models.modelfile import read_extra_arrays
from molinv.models.modelfile import HEADER_MEMBER, _header_digest
from tests.test_models_atomwise import random_atom_features
from tests.test_models_linear import molecules


def fitted_models():
    atom_X, atom_y = random_atom_features(40, seed=11)
    mols, _, _ = molecules(40, seed=12)
    rng = np.random.default_rng(13)
    global_X = with_element_counts(rng.normal(size=(40, 4)), mols)
    global_y = global_X.values[:, 0] ** 2 + global_X.counts @ np.array([-1.0, -30.0, -40.0, -50.0])
    return [
        (ElementBaseline().fit(atom_X, atom_y), atom_X),
        (KernelRidgeCV("gaussian", widths=(1.0, 2.0), regularizations=(1e-4, 1e-2), cv=3, scale=True).fit(global_X, global_y), global_X),
        (AtomwiseKernelRidgeCV(widths=(1.0, 2.0), regularizations=(1e-4, 1e-2), cv=3).fit(atom_X, atom_y), atom_X),
        (LinearRidge(regularization=0.1).fit(atom_X, atom_y), atom_X),
        (NystromRidge("atomwise", width=1.5, regularization=1e-3, n_landmarks=20).fit(atom_X, atom_y), atom_X),
        (NystromRidge("laplacian", width=2.0, regularization=1e-3, n_landmarks=15).fit(global_X, global_y), global_X),
    ]


@pytest.fixture(scope="module")
def models():
    return fitted_models()


def test_save_load_predicts_identically(models, tmp_path):
    settings = {"descriptor": "example", "params": {"cutoff": 5.0}}
    for i, (model, X) in enumerate(models):
        path = save_model(tmp_path / f"model{i}", model, {"descriptor": settings})
        loaded, metadata = load_model(path)
        assert type(loaded) is type(model)
        assert metadata == {"descriptor": settings}
        np.testing.assert_array_equal(loaded.predict(X), model.predict(X))
        if hasattr(model, "std_scale_"):
            np.testing.assert_array_equal(loaded.predict(X, return_std=True)[1], model.predict(X, return_std=True)[1])


def rewrite(path, target, change):
    """Copy the zip at ``path`` to ``target`` with member contents passed through ``change(name, bytes)``."""
    with zipfile.ZipFile(path) as source, zipfile.ZipFile(target, "w") as sink:
        for info in source.infolist():
            sink.writestr(info.filename, change(info.filename, source.read(info.filename)))


def test_damaged_files_raise_clear_errors(models, tmp_path):
    model, X = models[1]
    path = save_model(tmp_path / "good.npz", model, {})

    truncated = tmp_path / "truncated.npz"
    truncated.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    with pytest.raises(ModelFileError, match="truncated.npz.*unreadable or truncated"):
        load_model(truncated)

    def flip_last_byte(name, data):
        return data[:-1] + bytes([data[-1] ^ 1]) if name == "array.dual_coef_.npy" else data

    edited = tmp_path / "edited_array.npz"
    rewrite(path, edited, flip_last_byte)
    with pytest.raises(ModelFileError, match="edited_array.npz.*'dual_coef_' was edited"):
        load_model(edited)

    def header_change(update, redigest):
        def change(name, data):
            if name != HEADER_MEMBER + ".npy":
                return data
            array = np.load(io.BytesIO(data), allow_pickle=False)
            header = json.loads(array.tobytes().decode())
            update(header)
            if redigest:
                header["header_sha256"] = _header_digest(header)
            out = io.BytesIO()
            np.save(out, np.frombuffer(json.dumps(header).encode(), dtype=np.uint8))
            return out.getvalue()
        return change

    width_edit = tmp_path / "edited_header.npz"
    rewrite(path, width_edit, header_change(lambda h: h["fitted"].update(width_=99.0), redigest=False))
    with pytest.raises(ModelFileError, match="header was edited"):
        load_model(width_edit)

    newer = tmp_path / "newer.npz"
    rewrite(path, newer, header_change(lambda h: h.update(format_version=2), redigest=True))
    with pytest.raises(ModelFileError, match="newer.npz.*format version 2"):
        load_model(newer)


def test_pickled_content_is_refused(tmp_path):
    path = tmp_path / "pickled.npz"
    np.savez(path, **{HEADER_MEMBER: np.array([{"format": "molinv-model"}], dtype=object)})
    with pytest.raises(ModelFileError, match="pickled.npz"):
        load_model(path)


def test_extra_arrays_round_trip_and_are_checked(models, tmp_path):
    model, X = models[0]
    extra = {"distances": np.linspace(0.0, 1.0, 7)}
    path = save_model(tmp_path / "extra.npz", model, {}, extra_arrays=extra)
    np.testing.assert_array_equal(read_extra_arrays(path)["distances"], extra["distances"])

    def flip(name, data):
        return data[:-1] + bytes([data[-1] ^ 1]) if name == "extra.distances.npy" else data

    rewrite(path, tmp_path / "extra_edited.npz", flip)
    with pytest.raises(ModelFileError, match="extra_edited.npz.*extra arrays"):
        load_model(tmp_path / "extra_edited.npz")
    with pytest.raises(TypeError, match="pickle"):
        save_model(tmp_path / "objects.npz", model, {}, extra_arrays={"bad": np.array([{}], dtype=object)})


def test_every_single_byte_flip_in_the_zip_structure_is_refused_in_one_line(models, tmp_path):
    # Zip local headers start with PK\x03\x04 and the central directory with PK\x01\x02
    # (PKWARE APPNOTE.TXT, sections 4.3.7 and 4.3.12): flip every byte of every such header.
    model, X = models[3]
    data = save_model(tmp_path / "good.npz", model, {}).read_bytes()
    starts = [i for i in range(len(data) - 4) if data[i:i + 4] in (b"PK\x03\x04", b"PK\x01\x02")]
    positions = sorted({p for start in starts for p in range(start, min(start + 46, len(data)))})
    damaged = tmp_path / "damaged.npz"
    outcomes = set()
    for position in positions:
        for value in (data[position] ^ 0xFF, data[position] ^ 0x01):
            damaged.write_bytes(data[:position] + bytes([value]) + data[position + 1:])
            try:
                loaded, _ = load_model(damaged)
            except ModelFileError as error:
                assert "damaged.npz" in str(error) and "\n" not in str(error)
                outcomes.add("refused")
            else:
                # A flip the format does not check (a date, an unused field): same model.
                np.testing.assert_array_equal(loaded.predict(X), model.predict(X))
                outcomes.add("read")
    assert "refused" in outcomes


def test_a_npy_array_given_as_model_is_refused(tmp_path):
    path = tmp_path / "coefficients.npy"
    np.save(path, np.arange(5.0))
    with pytest.raises(ModelFileError, match="coefficients.npy.*not a molinv model file"):
        load_model(path)


def test_a_failed_save_leaves_the_previous_file_whole(models, tmp_path, monkeypatch):
    model, X = models[3]
    path = save_model(tmp_path / "model.npz", model, {"round": 1})

    def disk_full(handle, **arrays):
        handle.write(b"PK\x03\x04 half a model")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(np, "savez_compressed", disk_full)
    with pytest.raises(OSError, match="No space left"):
        save_model(path, model, {"round": 2})
    monkeypatch.undo()
    assert load_model(path)[1] == {"round": 1}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model.npz"]
