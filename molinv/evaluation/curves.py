"""Learning curves: test error against training-set size, honestly measured.

One held-out test set is drawn first and never trained on. Training sets of each
size on a geometric ladder are drawn from the rest, several times per size with
seeds that depend only on (seed, size, draw), so that every model on the same
data sees identical splits. Hyperparameters are whatever the model chooses inside
its own ``fit`` (use a cross-validated model: the test set plays no part). Models are
fitted without their predictive-uncertainty state (``predictive_std=False``).

Every finished point is written to the run folder at once (an ``.npz`` of test
predictions and a ``.json`` of its numbers), so an interrupted run resumes from
the finished points.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from sklearn.base import clone
from tqdm.auto import tqdm

from molinv.errors import MolinvError
from molinv.models.kernel_ridge import cv_splitter
from molinv.molecules.units import convert_energy
from molinv.outputs import written_atomically

#: The default ladder of training sizes (roughly 1-2-5 per decade; common practice, no source).
DEFAULT_SIZES = (100, 200, 500, 1000, 2000, 5000, 10000, 20000, 50000, 100000)


class CurveError(MolinvError, ValueError):
    """Settings a learning curve cannot run with."""


def size_ladder(n_available: int, sizes: Sequence[int] = DEFAULT_SIZES) -> list[int]:
    """The sizes of ``sizes`` that fit into ``n_available`` training candidates."""
    ladder = sorted({int(s) for s in sizes if 0 < int(s) <= n_available})
    if not ladder:
        raise CurveError(f"no training size in {list(sizes)} fits the {n_available} molecules left after the test set")
    return ladder


def test_split(n_molecules: int, test_size: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(test, pool): a fixed random test set, drawn first, and everything else."""
    if not 0 < test_size < n_molecules:
        raise CurveError(f"test set of {test_size} cannot be drawn from {n_molecules} molecules")
    order = np.random.default_rng([seed, 0]).permutation(n_molecules)
    return np.sort(order[:test_size]), np.sort(order[test_size:])


def training_draw(pool: np.ndarray, size: int, draw: int, seed: int) -> np.ndarray:
    """A training set of ``size`` from ``pool``; depends only on (seed, size, draw)."""
    rng = np.random.default_rng([seed, 1, size, draw])
    return np.sort(rng.choice(pool, size=size, replace=False))


def error_metrics(reference: np.ndarray, predicted: np.ndarray) -> dict[str, float]:
    errors = np.asarray(predicted, float) - np.asarray(reference, float)
    return {
        "mae": float(np.mean(np.abs(errors))),
        "rmse": float(np.sqrt(np.mean(errors**2))),
        "max_error": float(np.max(np.abs(errors))),
    }


def _dataset_fingerprint(y: np.ndarray, test: np.ndarray) -> str:
    digest = hashlib.sha256(np.ascontiguousarray(y, dtype=np.float64).tobytes())
    digest.update(np.ascontiguousarray(test, dtype=np.int64).tobytes())
    return digest.hexdigest()[:16]


def chosen_hyperparameters(model) -> dict:
    """What a cross-validated model chose (``width_``, ``regularization_``), flagging grid edges.

    A choice on the edge of its grid means the best value may lie outside it.
    """
    chosen = {}
    for attribute, grid_name in (("width_", "widths"), ("regularization_", "regularizations")):
        if not hasattr(model, attribute):
            continue
        key = attribute.rstrip("_")
        chosen[key] = float(getattr(model, attribute))
        grid = getattr(model, grid_name, None)
        # Widths may be given in units of a data-derived length (width_unit="median").
        unit = float(getattr(model, "width_unit_value_", 1.0)) if key == "width" else 1.0
        if grid is not None and len(grid) > 1 and any(np.isclose(chosen[key], unit * edge, rtol=1e-9)
                                                     for edge in (min(grid), max(grid))):
            chosen[f"{key}_at_grid_edge"] = True
    if getattr(model, "refused_", None):
        # Better grid points whose final factorisation failed (see KernelRidgeCV).
        chosen["refused"] = len(model.refused_)
    return chosen


#: What a choice on each edge of the grid means, in plain words.
EDGE_ADVICE = {
    ("width", "low"): "the narrowest kernel width tried: training molecules barely inform one another, so expect "
                      "large errors away from them; more training molecules or another descriptor usually help",
    ("width", "high"): "the widest kernel width tried: the cross-validated error might still fall with wider "
                       "kernels than the grid offers; the error above is what this model achieves",
    ("regularization", "low"): "the smallest regularisation tried: the training energies are fitted almost "
                               "exactly, as suits noise-free quantum-chemistry labels",
    ("regularization", "high"): "the largest regularisation tried: the labels look noisy or the descriptor misses "
                                "what drives them; check the energies' unit and outliers",
}


def fit_summary(model, unit: str = "kcal/mol") -> list[str]:
    """Lines that say how good a cross-validated model is: its cross-validated MAE (in ``unit``
    and eV), the width and regularisation it chose, and what a choice on a grid edge means.
    Empty for models without a cross-validation (``cv_mae_``)."""
    errors = getattr(model, "cv_mae_", None)
    if errors is None or not hasattr(model, "width_"):
        return []
    scale = float(getattr(model, "width_unit_value_", 1.0))
    widths = np.asarray(model.widths, float) * scale
    regularizations = np.asarray(model.regularizations, float)
    i_width = int(np.argmin(np.abs(widths - model.width_)))
    i_reg = int(np.argmin(np.abs(np.log(regularizations) - np.log(model.regularization_))))
    mae = float(errors[i_width, i_reg])
    searched = len(getattr(model, "search_rows_", []))
    n_folds = cv_splitter(getattr(model, "cv", 5), None).get_n_splits(np.zeros((searched, 1)))
    lines = [f"cross-validated MAE ({n_folds}-fold, {searched} molecules): "
             f"{convert_energy(mae, 'eV', unit):.3g} {unit} ({mae:.3g} eV)"]
    in_medians = getattr(model, "width_unit", "absolute") == "median"
    width = (f"{model.width_ / scale:g} x the median training distance ({model.width_:.4g} in descriptor units)"
             if in_medians else f"{model.width_:g}")
    lines.append(f"chosen kernel width {width}, regularisation {model.regularization_:g}")
    for name, index, grid in (("width", i_width, widths), ("regularization", i_reg, regularizations)):
        if len(grid) > 1 and index in (0, len(grid) - 1):
            lines.append(f"note: {EDGE_ADVICE[name, 'low' if index == 0 else 'high']}")
    return lines


@dataclass
class CurveRun:
    """A learning-curve run folder: settings, test set, and one file pair per finished point."""

    folder: Path
    y: np.ndarray
    test: np.ndarray
    pool: np.ndarray
    sizes: list[int]
    n_draws: int
    seed: int

    @classmethod
    def open(cls, folder, y, *, test_size: int, sizes=DEFAULT_SIZES, n_draws: int = 3, seed: int = 0) -> "CurveRun":
        """Create the run folder, or reopen it when its settings match (else refuse)."""
        folder = Path(folder)
        y = np.asarray(y, dtype=float)
        if y.ndim != 1 or not np.all(np.isfinite(y)):
            raise CurveError("targets must be a 1-D array of finite energies")
        if n_draws < 1:
            raise CurveError("n_draws must be at least 1")
        test, pool = test_split(len(y), test_size, seed)
        ladder = size_ladder(len(pool), sizes)
        settings = {"n_molecules": len(y), "test_size": int(test_size), "seed": int(seed),
                    "dataset": _dataset_fingerprint(y, test)}
        folder.mkdir(parents=True, exist_ok=True)
        record = folder / "run.json"
        if record.exists():
            stored = json.loads(record.read_text())
            if stored != settings:
                raise CurveError(
                    f"{folder} holds a run on other data or settings ({stored}); choose another folder"
                )
        else:
            with written_atomically(record) as temporary:
                temporary.write_text(json.dumps(settings, indent=2))
        return cls(folder, y, test, pool, ladder, int(n_draws), int(seed))

    def _label_folder(self, label: str) -> Path:
        return self.folder / "points" / "".join(c if c.isalnum() or c in "-_." else "_" for c in label)

    def _point_path(self, label: str, size: int, draw: int) -> Path:
        return self._label_folder(label) / f"n{size:07d}-d{draw:02d}"

    def run(self, X, model, label: str, progress: bool | None = None, settings: dict | None = None) -> pd.DataFrame:
        """Fit ``clone(model)`` on every (size, draw) not yet done; return all points of ``label``.

        ``X`` is anything the model takes that indexes by molecule (array,
        CountedFeatures, AtomFeatures), in the order of the targets. ``settings`` (JSON)
        describes how ``X`` was made (the descriptor's settings): with the model's
        parameters it is the key of the label's points, so a rerun with other settings
        into the same folder is refused rather than served the old points.
        """
        if len(X) != len(self.y):
            raise CurveError(f"{len(X)} feature rows for {len(self.y)} targets")
        self._claim_label(label, {"model": type(model).__name__, "params": model.get_params(deep=False),
                                  "features": settings or {}})
        jobs = [(size, draw) for size in self.sizes for draw in range(self.n_draws)]
        todo = [(s, d) for s, d in jobs if not self._point_path(label, s, d).with_suffix(".json").exists()]
        X_test, y_test = X[self.test], self.y[self.test]
        for size, draw in tqdm(todo, desc=f"curve {label}", unit="fit", disable=None if progress is None else not progress):
            train = training_draw(self.pool, size, draw, self.seed)
            fitted = clone(model)
            if "predictive_std" in fitted.get_params():
                # Only test errors are measured: the uncertainty state (for exact kernel ridge a
                # second n x n factor and its inverse) would cost time and memory for nothing.
                fitted.set_params(predictive_std=False)
            started = time.perf_counter()
            fitted.fit(X[train], self.y[train])
            fit_seconds = time.perf_counter() - started
            predicted = np.asarray(fitted.predict(X_test), dtype=float)
            point = {"label": label, "size": size, "draw": draw, **error_metrics(y_test, predicted),
                     "fit_seconds": fit_seconds, "hyperparameters": chosen_hyperparameters(fitted)}
            path = self._point_path(label, size, draw)
            path.parent.mkdir(parents=True, exist_ok=True)
            with written_atomically(path.with_suffix(".npz")) as temporary, open(temporary, "wb") as handle:
                np.savez(handle, predicted=predicted)
            # The .json is written last: its presence marks the point as finished.
            with written_atomically(path.with_suffix(".json")) as temporary:
                temporary.write_text(json.dumps(point))
        return self.points(label)

    def _claim_label(self, label: str, key: dict) -> None:
        """Record the settings of ``label``'s points, or refuse when they differ from the recorded ones."""
        key = json.loads(json.dumps(key, sort_keys=True, default=_setting_text))
        key["params"] = {k: v for k, v in key["params"].items() if k not in NOT_NUMERIC_PARAMS}
        folder = self._label_folder(label)
        record = folder / "settings.json"
        if record.exists():
            stored = json.loads(record.read_text())
            if stored != key:
                differing = sorted(_differences(stored, key))
                raise CurveError(f"{folder}: the points of {label!r} were computed with other settings "
                                 f"(differing: {', '.join(differing)[:300]}); choose another folder")
            return
        if any(folder.glob(POINT_PATTERN)):
            raise CurveError(f"{folder}: points of {label!r} without a record of their settings (an older "
                             "molinv); choose another folder")
        folder.mkdir(parents=True, exist_ok=True)
        with written_atomically(record) as temporary:
            temporary.write_text(json.dumps(key, indent=2, sort_keys=True))

    def points(self, label: str | None = None) -> pd.DataFrame:
        """Every finished point (errors in eV), optionally of one label."""
        rows = [json.loads(p.read_text()) for p in sorted((self.folder / "points").glob("*/" + POINT_PATTERN))]
        table = pd.DataFrame(rows, columns=["label", "size", "draw", "mae", "rmse", "max_error", "fit_seconds",
                                            "hyperparameters"])
        return table if label is None else table[table["label"] == label].reset_index(drop=True)

    def predictions(self, label: str, size: int, draw: int = 0) -> np.ndarray:
        """Test-set predictions (eV) of one finished point, in the order of ``self.test``."""
        with np.load(self._point_path(label, size, draw).with_suffix(".npz"), allow_pickle=False) as data:
            return data["predicted"]


#: The files of finished points in a label's folder (beside its settings.json).
POINT_PATTERN = "n*-d*.json"

#: Model parameters that change how a fit runs, not its numbers.
NOT_NUMERIC_PARAMS = ("progress", "n_jobs")


def _setting_text(value) -> str:
    """A JSON stand-in for a parameter that is an object: its class and its own parameters
    (never its memory address, which would differ on every run)."""
    if hasattr(value, "get_params"):
        return f"{type(value).__name__}({json.dumps(value.get_params(deep=False), sort_keys=True, default=str)})"
    return re.sub(r" at 0x[0-9a-f]+", "", str(value))


def _differences(stored, current, prefix: str = "") -> set[str]:
    """Dotted names of the settings that differ between two JSON objects."""
    if isinstance(stored, dict) and isinstance(current, dict):
        return {name for key in set(stored) | set(current)
                for name in _differences(stored.get(key), current.get(key), f"{prefix}{key}.")}
    return {prefix.rstrip(".")} if stored != current else set()


def summarize(points: pd.DataFrame, unit: str = "kcal/mol") -> pd.DataFrame:
    """Mean and spread over draws per (label, size), converted from eV to ``unit``: columns
    label, size, ``<metric>_<mean|std>_<unit>`` for mae, rmse and max_error, n_draws."""
    table = points.copy()
    for column in ("mae", "rmse", "max_error"):
        table[column] = convert_energy(table[column].to_numpy(), "eV", unit)
    grouped = table.groupby(["label", "size"])
    summary = grouped[["mae", "rmse", "max_error"]].agg(["mean", "std"])
    summary.columns = [f"{metric}_{stat}_{unit}" for metric, stat in summary.columns]
    summary["n_draws"] = grouped.size()
    return summary.reset_index()


@dataclass(frozen=True)
class PowerLaw:
    """log MAE = intercept + slope * log N, fitted by least squares on every draw."""

    slope: float
    slope_std: float  # NaN when fitted on two points only
    intercept: float
    sizes_used: tuple[int, ...]

    def mae_at(self, size: float) -> float:
        return math.exp(self.intercept + self.slope * math.log(size))

    def size_for(self, target_mae: float) -> float:
        """Training size where the extrapolated curve reaches ``target_mae`` (inf if it never does)."""
        if self.slope >= 0:
            return math.inf
        return math.exp((math.log(target_mae) - self.intercept) / self.slope)

    def size_range_for(self, target_mae: float) -> tuple[float, float]:
        """The same size for slope -/+ one standard error: how uncertain the extrapolation is
        (NaN, NaN when the fit has no error estimate)."""
        if math.isnan(self.slope_std):
            return (math.nan, math.nan)
        sizes = []
        for slope in (self.slope - self.slope_std, self.slope + self.slope_std):
            # Pivot at the geometric centre of the fitted sizes, where the fit is best determined.
            centre = float(np.mean(np.log(self.sizes_used)))
            log_mae_centre = self.intercept + self.slope * centre
            sizes.append(math.inf if slope >= 0 else math.exp(centre + (math.log(target_mae) - log_mae_centre) / slope))
        return (min(sizes), max(sizes))


def fit_power_law(points: pd.DataFrame, largest_sizes: int = 4) -> PowerLaw:
    """Fit the ``largest_sizes`` largest sizes of one label's points.

    Small training sets often fall faster or slower than the asymptotic rate, so
    the extrapolation uses the tail of the curve (common practice, no source).
    """
    sizes = sorted(points["size"].unique())[-largest_sizes:]
    tail = points[points["size"].isin(sizes)]
    if len(sizes) < 2:
        raise CurveError("a slope needs at least two training sizes")
    x, y = np.log(tail["size"].to_numpy(float)), np.log(tail["mae"].to_numpy(float))
    design = np.column_stack([np.ones_like(x), x])
    coefficients, *_ = np.linalg.lstsq(design, y, rcond=None)
    residuals = y - design @ coefficients
    if len(x) <= 2:
        # A line through two points has no residual left to estimate its error from.
        slope_std = math.nan
    else:
        covariance = np.linalg.inv(design.T @ design) * float(residuals @ residuals) / (len(x) - 2)
        slope_std = math.sqrt(covariance[1, 1])
    return PowerLaw(float(coefficients[1]), float(slope_std), float(coefficients[0]), tuple(int(s) for s in sizes))
