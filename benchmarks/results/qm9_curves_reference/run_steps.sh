#!/usr/bin/env bash
# Reference-descriptor curves (issue 5): exact kernel ridge ladder, extra draws at small sizes, then Nystrom.
cd /work/wt/refcurves
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 PYTHONPATH=/work/wt/refcurves
PY="nice -n 19 /work/main/.venv/bin/python"
COMMON="--test-size 10000 --seed 0 --jobs 1 --cache /work/main/benchmarks/results/feature_cache --out /work/runs/refcurves --target 1.0 --descriptor bonds --descriptor coulomb-sorted --descriptor coulomb --descriptor density"
log() { echo "# $(date -u +%H:%M:%S) UTC $*, load $(cut -d' ' -f1-3 /proc/loadavg)" >> /work/runs/refcurves/steps.log; }
log "step 1 start: molinv curve qm9::0 $COMMON --draws 1 --model kernel --sizes 100 200 500 1000 2000 5000 10000 20000"
$PY -m molinv.cli curve qm9::0 $COMMON --draws 1 --model kernel --sizes 100 200 500 1000 2000 5000 10000 20000 || exit 1
log "step 2 start: extra draws at small sizes (--draws 3 --sizes 100 200 500 1000 2000)"
$PY -m molinv.cli curve qm9::0 $COMMON --draws 3 --model kernel --sizes 100 200 500 1000 2000 || exit 1
log "step 3 start: python benchmarks/bench_learning_curves.py --descriptors bonds coulomb-sorted coulomb density --sizes 100 200 500 1000 2000 5000 10000 20000 --large-sizes 50000 100000 --test-size 10000 --draws 1 --seed 0 --jobs 1 --out /work/runs/refcurves --cache /work/main/benchmarks/results/feature_cache"
$PY benchmarks/bench_learning_curves.py --descriptors bonds coulomb-sorted coulomb density --sizes 100 200 500 1000 2000 5000 10000 20000 --large-sizes 50000 100000 --test-size 10000 --draws 1 --seed 0 --jobs 1 --out /work/runs/refcurves --cache /work/main/benchmarks/results/feature_cache || exit 1
log "all done"
