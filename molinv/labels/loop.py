"""The pick-compute-refit loop, with its learning curve, resumable round by round.

A fixed test set is labelled first and never picked. Round 0 labels a random
initial set; every later round fits the model on everything labelled so far,
measures it on the test set, picks the next batch from the unlabelled pool
(``strategy='uncertain'``: :func:`molinv.labels.choose.pick_batch`;
``'spread'``: :func:`molinv.labels.choose.spread_batch`; ``'variance'``:
:func:`molinv.labels.choose.model_variance_batch`; ``'random'``: a seeded
random draw, the baseline to beat), and has it labelled. Labels come from a callable: :class:`HiddenLabels` reveals known
energies only when picked (simulation), :class:`ComputedLabels` computes them.

The run folder holds ``loop.json`` (settings), ``labels.csv`` (one row per
labelled molecule, written as soon as its batch is labelled) and ``rounds.csv``
(one row per finished round: label, size, draw, round, mae, rmse, max_error in
eV, the layout of :func:`molinv.evaluation.summarize`). A rerun continues after
the last finished step and can extend the number of rounds.
"""

from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
import pandas as pd
from sklearn.base import clone
from tqdm.auto import tqdm

from molinv.evaluation.curves import chosen_hyperparameters, error_metrics
from molinv.models.kernel_ridge import fixed_hyperparameters
from molinv.outputs import written_atomically

from .choose import model_variance_batch, pick_batch, spread_batch
from .methods import LabelError, LabelMethod
from .run import label_molecules, molecule_names, read_labels

STRATEGIES = ("uncertain", "spread", "variance", "random")
LABEL_COLUMNS = ["position", "name", "round", "energy_eV", "reason"]
ROUND_COLUMNS = ["label", "size", "draw", "round", "mae", "rmse", "max_error", "fit_seconds", "hyperparameters"]


@dataclass
class HiddenLabels:
    """Known energies (eV) revealed only for the positions asked for; ``revealed`` counts them."""

    energies: np.ndarray
    revealed: set = field(default_factory=set)

    def __call__(self, positions: np.ndarray) -> tuple[np.ndarray, list[str]]:
        self.revealed.update(int(p) for p in positions)
        return np.asarray(self.energies, float)[positions], [""] * len(positions)


@dataclass
class ComputedLabels:
    """Energies computed with ``method`` into the labels file ``path`` (resumable itself).

    ``target`` is 'atomization_energy_eV' or 'energy_eV'; failed molecules come back as NaN with the reason.
    """

    molecules: Sequence
    method: LabelMethod
    path: Path
    target: str = "atomization_energy_eV"
    n_jobs: int = 1
    progress: bool | None = None

    def __call__(self, positions: np.ndarray) -> tuple[np.ndarray, list[str]]:
        chosen = [self.molecules[p] for p in positions]
        label_molecules(chosen, self.method, self.path, n_jobs=self.n_jobs, progress=self.progress)
        table = read_labels(self.path, self.method).set_index("name")
        rows = table.loc[molecule_names(chosen)]
        return rows[self.target].to_numpy(float), rows["reason"].tolist()


def _append(path: Path, rows: list[dict], columns: list[str]) -> None:
    frame = pd.DataFrame(rows, columns=columns)
    frame.to_csv(path, mode="a", header=not path.exists() or path.stat().st_size == 0, index=False)


@dataclass
class PickLoop:
    """One resumable loop over precomputed model inputs.

    ``inputs`` is anything the regressor takes that indexes by molecule (as in
    :class:`molinv.evaluation.CurveRun`); ``vectors`` one descriptor vector per
    molecule for the diversity step; ``test`` the positions of the test set;
    ``sizes`` the number of labelled training molecules after each round (round 0
    is the random initial set; each later round adds the difference). With
    ``tune_once`` a cross-validated regressor searches its grid on round 0 only and
    later rounds refit with the width and regularisation it chose (cheaper refits).
    """

    folder: Path
    names: Sequence[str]
    inputs: object
    vectors: np.ndarray
    regressor: object
    labeller: Callable
    test: np.ndarray
    sizes: Sequence[int] = (100, 200, 300, 400, 500)
    strategy: str = "uncertain"
    seed: int = 0
    shortlist_factor: float = 4.0
    reference_size: int = 1000
    tune_once: bool = False

    def __post_init__(self):
        self.folder = Path(self.folder)
        self.test = np.sort(np.asarray(self.test, dtype=int))
        if self.strategy not in STRATEGIES:
            raise LabelError(f"unknown strategy {self.strategy!r}; choose one of: {', '.join(STRATEGIES)}")
        if len(self.names) != len(self.inputs) or len(self.vectors) != len(self.names):
            raise LabelError(f"{len(self.names)} names, {len(self.inputs)} model inputs and {len(self.vectors)} "
                             "vectors: one of each per molecule")
        self.sizes = [int(s) for s in self.sizes]
        if not self.sizes or self.sizes[0] < 2 or any(b <= a for a, b in zip(self.sizes, self.sizes[1:])):
            raise LabelError(f"sizes {self.sizes} must start at 2 or more and increase")
        if self.sizes[-1] > len(self.names) - len(self.test):
            raise LabelError(f"{self.sizes[-1]} training molecules do not fit beside {len(self.test)} test "
                             f"molecules in {len(self.names)}")
        self.folder.mkdir(parents=True, exist_ok=True)
        digest = hashlib.sha256("\n".join(self.names).encode())
        digest.update(self.test.tobytes())
        settings = {"molecules": hashlib.sha256(digest.digest()).hexdigest()[:16], "n_molecules": len(self.names),
                    "test_size": int(len(self.test)), "strategy": self.strategy, "seed": self.seed,
                    "shortlist_factor": self.shortlist_factor}
        if self.strategy == "variance":
            settings["reference_size"] = int(self.reference_size)
        if self.tune_once:
            settings["tune_once"] = True
        self._tuned = None
        record = self.folder / "loop.json"
        if record.exists():
            stored = json.loads(record.read_text())
            earlier = stored.pop("sizes")
            # A finished loop may be extended by more rounds, never changed.
            if stored != settings or earlier != self.sizes[: len(earlier)]:
                raise LabelError(f"{self.folder} holds a loop with other molecules or settings "
                                 f"({record.read_text().strip()}); choose another folder")
        with written_atomically(record) as temporary:
            temporary.write_text(json.dumps({**settings, "sizes": self.sizes}, indent=2))

    @property
    def label(self) -> str:
        """The curve's name in reports: the strategy, with the shortlist size when it picks by uncertainty."""
        if self.strategy == "uncertain":
            return f"uncertain (shortlist {self.shortlist_factor:g}k)"
        return self.strategy

    @property
    def labels_path(self) -> Path:
        return self.folder / "labels.csv"

    @property
    def rounds_path(self) -> Path:
        return self.folder / "rounds.csv"

    def labelled(self) -> pd.DataFrame:
        if not self.labels_path.exists():
            return pd.DataFrame(columns=LABEL_COLUMNS)
        return pd.read_csv(self.labels_path, dtype={"name": str, "reason": str}, keep_default_na=False,
                           na_values={"energy_eV": ["", "nan"]})

    def rounds(self) -> pd.DataFrame:
        if not self.rounds_path.exists():
            return pd.DataFrame(columns=ROUND_COLUMNS)
        return pd.read_csv(self.rounds_path)

    def _label(self, positions: np.ndarray, round_number: int) -> None:
        energies, reasons = self.labeller(np.asarray(positions, dtype=int))
        rows = [{"position": int(p), "name": self.names[p], "round": round_number, "energy_eV": float(e),
                 "reason": r or ("" if np.isfinite(e) else "no energy")}
                for p, e, r in zip(positions, energies, reasons)]
        _append(self.labels_path, rows, LABEL_COLUMNS)

    def _regressor(self, labelled: pd.DataFrame, round_number: int):
        """The regressor to fit; with ``tune_once``, later rounds keep what the round-0 search chose."""
        if not self.tune_once or round_number == 0:
            return clone(self.regressor)
        if self._tuned is None:
            self._tuned = fixed_hyperparameters(self._fit(labelled, 0)[0])
        return clone(self._tuned)

    def _fit(self, labelled: pd.DataFrame, round_number: int):
        rows = labelled[(labelled["round"] >= 0) & (labelled["round"] <= round_number)
                        & np.isfinite(labelled["energy_eV"])]
        train = rows["position"].to_numpy(int)
        model = self._regressor(labelled, round_number)
        started = time.perf_counter()
        model.fit(self.inputs[train], rows["energy_eV"].to_numpy(float))
        return model, train, time.perf_counter() - started

    def _next_batch(self, model, train: np.ndarray, labelled: pd.DataFrame, round_number: int) -> np.ndarray:
        taken = np.zeros(len(self.names), dtype=bool)
        taken[labelled["position"].to_numpy(int)] = True
        taken[self.test] = True
        pool = np.flatnonzero(~taken)
        if len(pool) == 0:
            raise LabelError("the pool is exhausted: every molecule is labelled")
        size = min(self.sizes[round_number] - self.sizes[round_number - 1], len(pool))
        if self.strategy == "random":
            return np.random.default_rng([self.seed, round_number]).choice(pool, size=size, replace=False)
        if self.strategy == "spread":
            return pool[spread_batch(self.vectors[pool], size, self.vectors[train])]
        if self.strategy == "variance":
            return pool[model_variance_batch(model, self.inputs[pool], size, self.reference_size,
                                             [self.seed, round_number])]
        _, std = model.predict(self.inputs[pool], return_std=True)
        return pool[pick_batch(std, self.vectors[pool], size, self.shortlist_factor, self.vectors[train])]

    def run(self, progress: bool | None = None) -> pd.DataFrame:
        """Run every round not yet finished (each: label its batch, fit, measure); return the rounds table."""
        labelled = self.labelled()
        if not (labelled["round"] == -1).any():
            self._label(self.test, -1)
            labelled = self.labelled()
        test_rows = labelled[(labelled["round"] == -1) & np.isfinite(labelled["energy_eV"])]
        test_positions, test_energies = test_rows["position"].to_numpy(int), test_rows["energy_eV"].to_numpy(float)
        if len(test_positions) == 0:
            raise LabelError("no test molecule could be labelled")
        model = train = None
        bar = tqdm(range(len(self.sizes)), desc=f"pick-loop {self.strategy}", unit="round",
                   disable=None if progress is None else not progress)
        for round_number in bar:
            if not (labelled["round"] == round_number).any():
                if round_number == 0:
                    pool = np.setdiff1d(np.arange(len(self.names)), self.test)
                    batch = np.random.default_rng([self.seed, 0]).choice(
                        pool, size=self.sizes[0], replace=False)
                else:
                    if model is None:
                        model, train, _ = self._fit(labelled, round_number - 1)
                    batch = self._next_batch(model, train, labelled, round_number)
                self._label(batch, round_number)
                labelled = self.labelled()
            finished = self.rounds()
            if (finished["round"] == round_number).any():
                model = None  # refitted only if a later pick needs it
                continue
            model, train, seconds = self._fit(labelled, round_number)
            predicted = np.asarray(model.predict(self.inputs[test_positions]), float)
            point = {"label": self.label, "size": len(train), "draw": self.seed, "round": round_number,
                     **error_metrics(test_energies, predicted), "fit_seconds": seconds,
                     "hyperparameters": json.dumps(chosen_hyperparameters(model))}
            _append(self.rounds_path, [point], ROUND_COLUMNS)
        return self.rounds()
