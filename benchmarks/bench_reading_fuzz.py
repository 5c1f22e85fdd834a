"""The readers' fuzz test (``tests/test_reading_fuzz.py``) at a larger count, counting
rather than stopping at the first broken promise.

    nice -n 5 python benchmarks/bench_reading_fuzz.py --count 4000 --seed 1

For each format (XYZ, extended XYZ, SDF, SMILES, CSV), --count damaged files built and
checked exactly as the test does; prints per format the files, records written, records
undamaged, molecules read, records rejected, whole files refused (damaged CSV headers),
broken promises (with the first few, to reproduce: format and case seed) and seconds.
"""

from __future__ import annotations

import argparse
import importlib.util
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def load_fuzz_module():
    spec = importlib.util.spec_from_file_location("reading_fuzz", ROOT / "tests" / "test_reading_fuzz.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up by name
    spec.loader.exec_module(module)
    return module


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--count", type=int, default=2000, help="damaged files per format")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--show", type=int, default=5, help="broken promises printed in full")
    args = parser.parse_args()
    fuzz = load_fuzz_module()
    columns = ["files", "records_in", "undamaged", "good", "rejected", "refused_files", "broken"]
    print(f"{'format':8}" + "".join(f"{c:>14}" for c in columns) + f"{'seconds':>10}")
    totals, shown = Counter(), 0
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        for fmt in fuzz.FORMATS:
            counts, started = Counter(), time.perf_counter()
            for number in range(args.count):
                seed = args.seed * 1_000_003 + number
                case = fuzz.make_case(seed, fmt, folder)
                try:
                    counts += fuzz.check_case(case, folder / f"case.{case.suffix}")
                except Exception as error:  # noqa: BLE001  a broken promise is counted, then the run goes on
                    counts += Counter(files=1, broken=1)
                    if shown < args.show:
                        shown += 1
                        print(f"  broken: {fmt} case seed {seed}: {type(error).__name__}: {str(error)[:300]}")
            totals += counts
            print(f"{fmt:8}" + "".join(f"{counts[c]:>14,}" for c in columns) + f"{time.perf_counter() - started:>10.1f}")
    print(f"{'all':8}" + "".join(f"{totals[c]:>14,}" for c in columns))


if __name__ == "__main__":
    main()
