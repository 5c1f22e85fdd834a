"""Model files: one ``.npz`` holding a fitted model's arrays and a JSON header, never a pickle.

Layout (a zip of deflated ``.npy`` members, as written by :func:`numpy.savez_compressed`; the
per-atom descriptors of a kernel model are half zeros, so the file is about half the size of
its arrays, and loading gives the arrays bit for bit):

* ``header.json`` - a uint8 array with UTF-8 JSON: format name and version, model class
  and parameters, fitted scalars, the caller's metadata (descriptor settings, ...),
  units, element set, library versions, training-data fingerprint, the SHA-256 of
  every array and one SHA-256 over the whole header;
* ``array.<name>`` - one member per fitted array.

Loading opens the file with ``allow_pickle=False``, builds only classes listed in
:data:`MODEL_CLASSES` from plain JSON parameters, and checks every fingerprint, so a
truncated, edited or foreign file raises :class:`ModelFileError` naming the file and
the reason instead of predicting.
"""

from __future__ import annotations

import hashlib
import json
import platform
from pathlib import Path

import numpy as np
import scipy
import sklearn
from ase.data import chemical_symbols

import molinv
from molinv.errors import MolinvError
from molinv.models.baseline import ElementBaseline
from molinv.models.inputs import fingerprint
from molinv.models.kernel_ridge import AtomwiseKernelRidge, AtomwiseKernelRidgeCV, KernelRidgeCV, KernelRidgeModel
from molinv.models.linear import LinearRidge
from molinv.models.nystrom import NystromRidge, NystromRidgeCV
from molinv.outputs import written_atomically

FORMAT_NAME = "molinv-model"
FORMAT_VERSION = 1
HEADER_MEMBER = "header.json"
ARRAY_PREFIX = "array."
EXTRA_PREFIX = "extra."

MODEL_CLASSES = {
    cls.__name__: cls
    for cls in (
        ElementBaseline,
        KernelRidgeModel,
        KernelRidgeCV,
        AtomwiseKernelRidge,
        AtomwiseKernelRidgeCV,
        LinearRidge,
        NystromRidge,
        NystromRidgeCV,
    )
}

DEFAULT_UNITS = {"energy": "eV", "length": "Angstrom"}


class ModelFileError(MolinvError, ValueError):
    """A model file that cannot be used: unreadable, truncated, edited, or of another format version."""

    def __init__(self, path, reason: str):
        super().__init__(f"model file {str(path)!r}: {reason}")
        self.path, self.reason = str(path), reason


def _plain(value):
    """JSON form of a parameter or fitted scalar; tuples are tagged so they come back as tuples."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, tuple):
        return {"tuple": [_plain(v) for v in value]}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {"dict": {str(k): _plain(v) for k, v in value.items()}}
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    raise TypeError(f"cannot store a {type(value).__name__} in a model file")


def _restore(value):
    if isinstance(value, list):
        return [_restore(v) for v in value]
    if isinstance(value, dict):
        if set(value) == {"tuple"}:
            return tuple(_restore(v) for v in value["tuple"])
        if set(value) == {"dict"}:
            return {k: _restore(v) for k, v in value["dict"].items()}
        raise ValueError(f"unexpected JSON object {sorted(value)}")
    return value


def _header_digest(header: dict) -> str:
    body = {k: v for k, v in header.items() if k != "header_sha256"}
    return hashlib.sha256(json.dumps(body, sort_keys=True).encode()).hexdigest()


def _fitted_state(model):
    if type(model).__name__ not in MODEL_CLASSES or MODEL_CLASSES[type(model).__name__] is not type(model):
        raise TypeError(f"{type(model).__name__} is not a molinv model that can be saved")
    fitted = {k: v for k, v in vars(model).items() if k.endswith("_") and not k.startswith("_")}
    if not fitted:
        raise ValueError(f"{type(model).__name__} is not fitted")
    arrays = {k: v for k, v in fitted.items() if isinstance(v, np.ndarray)}
    scalars = {k: _plain(v) for k, v in fitted.items() if k not in arrays}
    for name, array in arrays.items():
        if array.dtype.hasobject:
            raise TypeError(f"fitted array {name} holds Python objects")
    return arrays, scalars


def _element_symbols(model) -> list[str]:
    for name in ("baseline_elements_", "feature_elements_", "train_numbers_", "landmark_numbers_"):
        numbers = getattr(model, name, None)
        if numbers is not None and len(numbers):
            return [chemical_symbols[int(z)] for z in np.unique(numbers) if int(z) > 0]
    elements = getattr(model, "elements_", ())
    return [chemical_symbols[int(z)] for z in elements]


def save_model(path, model, metadata: dict | None = None, extra_arrays: dict | None = None) -> Path:
    """Write a fitted molinv model to ``path`` (``.npz`` appended if missing).

    ``metadata`` is any JSON-able dict from the caller, typically ``{"descriptor":
    descriptor.settings(), "units": {...}}``; ``units`` defaults to eV and Angstrom.
    ``extra_arrays`` are the caller's arrays (for example an applicability check),
    checksummed like the model's and returned by :func:`read_extra_arrays`.
    """
    path = Path(path)
    if path.suffix != ".npz":
        path = path.with_name(path.name + ".npz")
    arrays, scalars = _fitted_state(model)
    extra_arrays = {name: np.asarray(a) for name, a in (extra_arrays or {}).items()}
    for name, array in extra_arrays.items():
        if array.dtype.hasobject:
            raise TypeError(f"extra array {name} holds Python objects (would need pickle)")
    metadata = dict(metadata or {})
    try:
        json.dumps(metadata)
    except TypeError as error:
        raise TypeError(f"metadata must be JSON-serialisable: {error}") from error
    header = {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "model_class": type(model).__name__,
        "params": {k: _plain(v) for k, v in model.get_params(deep=False).items()},
        "fitted": scalars,
        "metadata": metadata,
        "units": metadata.get("units", DEFAULT_UNITS),
        "elements": _element_symbols(model),
        "versions": {
            "molinv": molinv.__version__,
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "scikit-learn": sklearn.__version__,
            "python": platform.python_version(),
        },
        "training_fingerprint": scalars.get("training_fingerprint_"),
        "arrays_sha256": {name: fingerprint(array) for name, array in arrays.items()},
        "extra_sha256": {name: fingerprint(array) for name, array in extra_arrays.items()},
    }
    header["header_sha256"] = _header_digest(header)
    members = {ARRAY_PREFIX + name: array for name, array in arrays.items()}
    members.update({EXTRA_PREFIX + name: array for name, array in extra_arrays.items()})
    members[HEADER_MEMBER] = np.frombuffer(json.dumps(header, sort_keys=True).encode(), dtype=np.uint8)
    with written_atomically(path) as temporary, open(temporary, "wb") as handle:
        np.savez_compressed(handle, **members)
    return path


def read_header(path) -> dict:
    """The checked JSON header of a model file (raises :class:`ModelFileError`)."""
    return _read(path)[0]


def read_extra_arrays(path) -> dict:
    """The caller's arrays stored by :func:`save_model` (checked like the model's)."""
    return _read(path)[2]


def _read(path):
    path = Path(path)
    if not path.is_file():
        raise ModelFileError(path, "no such file")
    try:
        archive = np.load(path, allow_pickle=False)
    except Exception as error:  # noqa: BLE001  a damaged zip raises many types (NotImplementedError too)
        raise ModelFileError(path, f"unreadable or truncated ({_one_line(error)})") from error
    if not isinstance(archive, np.lib.npyio.NpzFile):
        raise ModelFileError(path, "not a molinv model file (a single array, not an .npz archive)")
    try:
        with archive:
            names = set(archive.files)
            if HEADER_MEMBER not in names:
                raise ModelFileError(path, "not a molinv model file (no header)")
            header = json.loads(archive[HEADER_MEMBER].tobytes().decode())
            arrays = {n[len(ARRAY_PREFIX) :]: archive[n] for n in names if n.startswith(ARRAY_PREFIX)}
            extras = {n[len(EXTRA_PREFIX) :]: archive[n] for n in names if n.startswith(EXTRA_PREFIX)}
    except ModelFileError:
        raise
    except Exception as error:  # noqa: BLE001  as above: any failure to read a member is damage
        raise ModelFileError(path, f"unreadable or truncated ({_one_line(error)})") from error
    if not isinstance(header, dict) or header.get("format") != FORMAT_NAME:
        raise ModelFileError(path, "not a molinv model file (wrong format name)")
    if header.get("format_version") != FORMAT_VERSION:
        raise ModelFileError(
            path,
            f"format version {header.get('format_version')!r} written by molinv "
            f"{header.get('versions', {}).get('molinv')}; this molinv {molinv.__version__} reads version {FORMAT_VERSION}",
        )
    if header.get("header_sha256") != _header_digest(header):
        raise ModelFileError(path, "header was edited (its SHA-256 does not match)")
    expected = header.get("arrays_sha256", {})
    if set(expected) != set(arrays):
        raise ModelFileError(path, f"arrays {sorted(set(expected) ^ set(arrays))} missing or unexpected")
    for name, array in arrays.items():
        if fingerprint(array) != expected[name]:
            raise ModelFileError(path, f"array {name!r} was edited (its SHA-256 does not match)")
    expected_extra = header.get("extra_sha256", {})
    if set(expected_extra) != set(extras) or any(fingerprint(a) != expected_extra[n] for n, a in extras.items()):
        raise ModelFileError(path, "extra arrays missing, unexpected or edited (SHA-256 mismatch)")
    return header, arrays, extras


def _one_line(error: Exception) -> str:
    return " ".join(f"{type(error).__name__}: {error}".split())[:300]


def load_model(path):
    """Rebuild a model saved by :func:`save_model`; returns ``(model, metadata)``.

    ``metadata`` is the caller's dict given at saving time.
    """
    header, arrays, _ = _read(path)
    cls = MODEL_CLASSES.get(header.get("model_class"))
    if cls is None:
        raise ModelFileError(path, f"unknown model class {header.get('model_class')!r}")
    try:
        model = cls(**{k: _restore(v) for k, v in header["params"].items()})
        fitted = {k: _restore(v) for k, v in header["fitted"].items()}
    except (TypeError, ValueError, KeyError) as error:
        raise ModelFileError(path, f"parameters do not fit {cls.__name__} in this molinv ({error})") from error
    for name, value in {**fitted, **arrays}.items():
        setattr(model, name, value)
    return model, header["metadata"]
