#!/usr/bin/env bash
# Reference-descriptor curves (issue 5) as they were run: resumable steps, single-threaded BLAS,
# the feature cache shared with the atoms run. Rerunning any step resumes from its finished points.
# Points of runs/reference and runs/reference_b are combined with those of the atoms run by
# benchmarks/combine_curves.py into benchmarks/results/qm9_curves_all/.
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1
COMMON="--test-size 10000 --seed 0 --jobs 1 --cache benchmarks/results/feature_cache --target 1.0"
# 1. exact kernel ridge ladder, one draw per size
python -m molinv.cli curve qm9::0 $COMMON --out runs/reference --descriptor bonds --descriptor coulomb-sorted \
    --descriptor coulomb --descriptor density --draws 1 --model kernel --sizes 100 200 500 1000 2000 5000 10000 20000
# 2. Nystrom points; a second process took density and coulomb to use the second core
python -m molinv.cli curve qm9::0 $COMMON --out runs/reference --descriptor bonds --descriptor coulomb-sorted \
    --draws 1 --model large --sizes 50000 100000 &
python -m molinv.cli curve qm9::0 $COMMON --out runs/reference_b --descriptor density --descriptor coulomb \
    --draws 1 --model large --sizes 50000 100000
wait
# 3. two more draws at the small sizes
python -m molinv.cli curve qm9::0 $COMMON --out runs/reference --descriptor bonds --descriptor coulomb-sorted \
    --descriptor coulomb --descriptor density --draws 3 --model kernel --sizes 100 200 500 1000 2000
python benchmarks/combine_curves.py --runs benchmarks/results/qm9_curves_atoms/run runs/reference/run \
    runs/reference_b/run --out benchmarks/results/qm9_curves_all
