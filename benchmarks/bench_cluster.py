"""Overhead of the Dask path against the local path, side by side in one run.

    python benchmarks/bench_cluster.py --n 20000 --workers 2

1. Fits --descriptor + --model on --train QM9 molecules.
2. Writes --n other QM9 molecules as an XYZ file (QM9's own geometries, so the work per
   chunk is describing and predicting, not embedding).
3. Screens it with the local path (joblib, --workers processes) and on a Dask LocalCluster
   (--workers single-threaded worker processes), alternating the order over --repeats,
   each into a fresh folder; checks the two ranked tables are identical; reports wall
   times, the overhead ratio (Dask / local, best of the repeats) and the time per chunk
   inside the workers, from which the throughput on N machines follows (see benchmarks/RESULTS.md).

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). On a shared machine timings are
noisy: compare the two paths as ratios within one run.
"""

from __future__ import annotations

import argparse
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from molinv.cluster import LocalProcesses
from molinv.cluster.dask_cluster import open_cluster
from molinv.molecules.qm9 import open_qm9
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening.screen import screen_file


def write_xyz(molecules, path: Path) -> None:
    with open(path, "w") as handle:
        for atoms in molecules:
            rows = "".join(f"{s} {x!r} {y!r} {z!r}\n" for s, (x, y, z) in zip(atoms.get_chemical_symbols(), atoms.positions.tolist()))
            handle.write(f"{len(atoms)}\n{atoms.info['name']}\n{rows}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--n", type=int, default=20000, help="molecules screened")
    parser.add_argument("--train", type=int, default=500)
    parser.add_argument("--descriptor", default="atoms")
    parser.add_argument("--model", default="linear")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--chunk-size", type=int, default=500)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    qm9 = open_qm9()
    order = qm9.sample(args.train + args.n, seed=args.seed)
    train = qm9.molecules(order[: args.train])
    descriptor = make_descriptor(args.descriptor)
    model = EnergyModel(descriptor, make_regressor(args.model, descriptor.per_atom, descriptor=args.descriptor))
    model.fit(train, [m.info["atomization_energy"] for m in train])
    work = Path(tempfile.mkdtemp(prefix="molinv-bench-cluster-"))
    candidates = work / "candidates.xyz"
    write_xyz(qm9.molecules(order[args.train :]), candidates)
    print(f"{args.descriptor} + {args.model} fitted on {args.train}; screening {args.n} QM9 geometries in chunks of "
          f"{args.chunk_size} with {args.workers} workers")

    started = time.perf_counter()
    cluster = open_cluster("local", n_workers=args.workers)
    cluster.client.wait_for_workers(args.workers)
    print(f"Dask LocalCluster started in {time.perf_counter() - started:.1f} s (not counted below)")
    paths = {"local": LocalProcesses(args.workers), "dask": cluster}
    # Both pools start their workers and import molinv there on first use; that start-up
    # is paid once per command, so it is measured apart from the screens.
    warm_up = work / "warm-up.xyz"
    write_xyz(qm9.molecules(order[args.train : args.train + 4 * args.workers]), warm_up)
    for name, executor in paths.items():
        started = time.perf_counter()
        screen_file(model, warm_up, work / f"warm-up-{name}", model_fingerprint="bench", chunk_size=1,
                    executor=executor, progress=False)
        print(f"{name} workers warmed up in {time.perf_counter() - started:.1f} s (not counted below)")
    times = {name: [] for name in paths}
    tables, chunk_seconds, chunk_cpu = {}, {name: [] for name in paths}, {name: [] for name in paths}
    for repeat in range(args.repeats):
        for name in (("local", "dask") if repeat % 2 == 0 else ("dask", "local")):
            out = work / f"{name}-{repeat}"
            started = time.perf_counter()
            summary = screen_file(model, candidates, out, model_fingerprint="bench", target="atomization_energy",
                                  chunk_size=args.chunk_size, executor=paths[name], progress=False)
            times[name].append(time.perf_counter() - started)
            chunk_seconds[name] += [report.seconds for report in summary.computed]
            chunk_cpu[name] += [report.cpu_seconds for report in summary.computed]
            tables[name] = pd.read_csv(summary.table_path)
            print(f"  {name:5s} repeat {repeat}: {times[name][-1]:7.1f} s  {args.n / times[name][-1]:7.1f} mol/s")
    cluster.close()
    same = tables["local"].equals(tables["dask"])
    best = {name: min(values) for name, values in times.items()}
    print(f"tables identical: {same}")
    print(f"best wall time: local {best['local']:.1f} s, dask {best['dask']:.1f} s; "
          f"overhead ratio dask/local {best['dask'] / best['local']:.3f} (goal <= 1.15)")
    for name, seconds in chunk_seconds.items():
        seconds, cpu = np.array(seconds), np.array(chunk_cpu[name])
        print(f"  {name:5s} per chunk of {args.chunk_size} (inside the worker): wall median {np.median(seconds):.2f} s, "
              f"mean {seconds.mean():.2f} s; CPU mean {cpu.mean():.2f} s ({args.chunk_size / cpu.mean():.0f} mol/s "
              f"per busy core)")
    shutil.rmtree(work)


if __name__ == "__main__":
    main()
