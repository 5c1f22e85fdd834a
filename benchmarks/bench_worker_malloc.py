"""What Dask's default worker setting MALLOC_TRIM_THRESHOLD_=65536 costs our chunks.

    python benchmarks/bench_worker_malloc.py --repeats 3

Describes one chunk of QM9 molecules with 'atoms' in a fresh process, with and without
the variable set (alternating), and prints user and system CPU seconds and minor page
faults of the describing step (from getrusage). Any such glibc setting freezes glibc's
mmap threshold (mallopt(3)), so numpy temporaries above 128 KiB are mapped and faulted
in anew; this is why `--cluster local` starts its workers without it.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys

SETTING = "MALLOC_TRIM_THRESHOLD_"


def describe_chunk(n_molecules: int) -> dict:
    from molinv.molecules.qm9 import open_qm9
    from molinv.recipes import make_descriptor

    qm9 = open_qm9()
    descriptor = make_descriptor("atoms").fit(qm9.molecules(qm9.sample(200, seed=2)))
    molecules = qm9.molecules(qm9.sample(n_molecules, seed=1))
    before = resource.getrusage(resource.RUSAGE_SELF)
    descriptor.transform(molecules)
    after = resource.getrusage(resource.RUSAGE_SELF)
    return {"user_s": after.ru_utime - before.ru_utime, "system_s": after.ru_stime - before.ru_stime,
            "minor_faults": after.ru_minflt - before.ru_minflt}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--molecules", type=int, default=500)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(describe_chunk(args.molecules)))
        return
    base = {name: value for name, value in os.environ.items() if name != SETTING}
    for repeat in range(args.repeats):
        for trimmed in (False, True):
            environment = {**base, SETTING: "65536"} if trimmed else base
            command = [sys.executable, __file__, "--child", "--molecules", str(args.molecules)]
            output = subprocess.run(command, env=environment, capture_output=True, text=True, check=True).stdout
            cost = json.loads(output.strip().splitlines()[-1])
            label = f"{SETTING}=65536" if trimmed else "unset"
            print(f"repeat {repeat} {label:>29}: user {cost['user_s']:.2f} s, system {cost['system_s']:.2f} s, "
                  f"minor page faults {cost['minor_faults']}")


if __name__ == "__main__":
    main()
