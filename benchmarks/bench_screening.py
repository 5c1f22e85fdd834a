"""Screening throughput (embedding, describing, predicting) and memory as the input grows.

    nice -n 5 python benchmarks/bench_screening.py --train 5000 --screen 1000 --sizes 5000 20000 --jobs 2

1. Fits --descriptor + --model (default: bag of bonds + Nystrom kernel ridge, the 'large'
   model, whose prediction is cheap) on --train QM9 molecules.
2. Stages, in this process on --screen QM9 SMILES not used for training: ETKDG+MMFF94
   embedding, describing and predicting (with the applicability distances) timed separately.
3. End to end, for each of --sizes: a CSV of that many held-out QM9 SMILES screened by
   ``screen_file`` with --jobs local worker processes (embedding, describing and predicting
   per chunk in the workers); molecules per second, and the peak resident memory of the
   whole process tree (this process and its workers, sampled every 0.2 s from /proc; Linux).
The model is trained on the SMILES route (geometries embedded from the training molecules'
SMILES); what the route costs in accuracy is measured by bench_smiles_route.py.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Timings on a shared 2-core
machine are noisy; compare stages as ratios within one run.
"""

from __future__ import annotations

import argparse
import os
import resource
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd

from molinv.cluster import LocalProcesses
from molinv.molecules import embed_smiles
from molinv.molecules.checks import MoleculeError
from molinv.molecules.route import onto_embedded_route
from molinv.molecules.qm9 import open_qm9
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening.screen import screen_file


def tree_rss(root: int) -> int:
    """Resident memory (bytes) of process ``root`` and all its descendants, from /proc."""
    parents, rss = {}, {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/status") as handle:
                fields = dict(line.split(":", 1) for line in handle if ":" in line)
        except OSError:
            continue
        parents[int(entry)] = int(fields["PPid"])
        rss[int(entry)] = int(fields.get("VmRSS", "0 kB").split()[0]) * 1024
    tree, grown = {root}, True
    while grown:
        found = {pid for pid, parent in parents.items() if parent in tree} - tree
        tree |= found
        grown = bool(found)
    return sum(rss.get(pid, 0) for pid in tree)


class PeakMemory:
    """Highest :func:`tree_rss` of this process seen while the block runs."""

    def __enter__(self):
        self.peak, self._running = tree_rss(os.getpid()), True
        self._thread = threading.Thread(target=self._watch, daemon=True)
        self._thread.start()
        return self

    def _watch(self):
        while self._running:
            self.peak = max(self.peak, tree_rss(os.getpid()))
            time.sleep(0.2)

    def __exit__(self, *exc):
        self._running = False
        self._thread.join()


def end_to_end(model, smiles, names, jobs: int, chunk_size: int, folder: Path) -> tuple[float, int, object]:
    """Seconds and peak tree memory for screening these SMILES from a CSV file."""
    candidates = folder / "candidates.csv"
    pd.DataFrame({"name": names, "smiles": smiles}).to_csv(candidates, index=False)
    with PeakMemory() as memory:
        started, cpu_started = time.perf_counter(), time.process_time()
        summary = screen_file(model, candidates, folder / "screen", model_fingerprint="bench",
                              target="atomization_energy", chunk_size=chunk_size, executor=LocalProcesses(jobs),
                              progress=False)
        seconds, main_cpu = time.perf_counter() - started, time.process_time() - cpu_started
    return seconds, main_cpu, memory.peak, summary


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--train", type=int, default=5000)
    parser.add_argument("--screen", type=int, default=1000, help="SMILES for the stage timings (one process)")
    parser.add_argument("--sizes", type=int, nargs="*", default=[5000, 20000],
                        help="SMILES counts screened end to end (memory flatness)")
    parser.add_argument("--jobs", type=int, default=2, help="worker processes for the end-to-end screens")
    parser.add_argument("--chunk-size", type=int, default=500)
    parser.add_argument("--descriptor", default="bonds")
    parser.add_argument("--model", default="large")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    qm9 = open_qm9()
    order = np.random.default_rng(args.seed).permutation(len(qm9))
    # On the screening route: training geometries embedded from their SMILES, as the candidates'.
    train = [m for m in onto_embedded_route(qm9.molecules(order[: args.train]), n_jobs=args.jobs)
             if not isinstance(m, str)]
    started = time.perf_counter()
    descriptor = make_descriptor(args.descriptor)
    regressor = make_regressor(args.model, descriptor.per_atom, descriptor=args.descriptor)
    model = EnergyModel(descriptor, regressor).fit(train, [m.info["atomization_energy"] for m in train])
    print(f"fit {args.descriptor} + {args.model} on {args.train}: {time.perf_counter() - started:.1f} s")

    screened = order[args.train : args.train + args.screen]
    timings = {}
    started = time.perf_counter()
    embedded, failures = [], 0
    for smiles in qm9.arrays["smiles"][screened]:
        try:
            embedded.append(embed_smiles(str(smiles)))
        except MoleculeError:
            failures += 1
    timings["embed"] = time.perf_counter() - started
    started = time.perf_counter()
    inputs = model._inputs(embedded)
    timings["describe"] = time.perf_counter() - started
    started = time.perf_counter()
    model.regressor_.predict(inputs)
    model.applicability_.distances(inputs)
    timings["predict"] = time.perf_counter() - started
    total = sum(timings.values())
    print(f"screen {len(screened)} SMILES ({failures} failed to embed):")
    for stage, seconds in timings.items():
        print(f"  {stage:9s} {seconds:8.1f} s  {len(screened) / seconds:8.1f} mol/s  {seconds / total:6.1%} of the time")
    print(f"  one process, stages in sequence: {len(screened) / total:.1f} mol/s; "
          f"peak memory {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20:.2f} GiB")

    start = args.train + args.screen
    with tempfile.TemporaryDirectory(prefix="molinv-bench-screen-") as folder:
        # The worker processes start, and import molinv, on first use: measured apart.
        warm_up = order[start : start + 2 * args.jobs]
        seconds = end_to_end(model, qm9.arrays["smiles"][warm_up], [str(i) for i in warm_up], args.jobs, 1,
                             Path(folder))[0]
        print(f"{args.jobs} worker processes started in {seconds:.1f} s (not counted below)")
    for size in args.sizes:
        positions = order[start : start + size]
        names = [f"qm9_{i:06d}" for i in qm9.arrays["index"][positions]]
        with tempfile.TemporaryDirectory(prefix="molinv-bench-screen-") as folder:
            seconds, main_cpu, peak, summary = end_to_end(model, qm9.arrays["smiles"][positions], names, args.jobs,
                                                          args.chunk_size, Path(folder))
        worker_cpu = sum(report.cpu_seconds for report in summary.computed)
        print(f"screen of {size} SMILES, {args.jobs} worker processes, chunks of {args.chunk_size}: {seconds:.1f} s, "
              f"{size / seconds:.1f} mol/s end to end; {summary.ok} ok, {summary.flagged} flagged, "
              f"{summary.failed} failed; peak memory of all processes {peak / 2**30:.2f} GiB", flush=True)
        # On a shared machine the workers get only part of a core; their CPU time says what
        # the same work needs on --jobs cores of its own (the main process reads and packs).
        print(f"  CPU: workers {worker_cpu:.0f} s ({size / worker_cpu:.1f} mol/s per core, "
              f"{args.jobs * size / worker_cpu:.1f} mol/s on {args.jobs} free cores), main process {main_cpu:.0f} s",
              flush=True)


if __name__ == "__main__":
    main()
