"""Peak memory of reading hostile inputs, measured side by side in one run (issue 17, item 2).

Each case runs in a fresh child process and reports its peak resident set size (ru_maxrss), so the
numbers do not contaminate each other:

- a small gzip bomb (a few hundred kB that expand to --bomb-mb MiB of CSV rows) read with the old
  one-shot ``gzip.decompress`` and with tumble's capped, streamed reader (refused at the cap);
- the same bomb under a small cap (TUMBLE_MAX_INPUT_MB), to show memory follows the cap, not the input;
- a plain file larger than the cap (refused from its size, never read);
- a 48 MiB file of tiny rows under the default cap: the worst case the line and cell limits allow.

Prints MiB and ratios; nothing is asserted (performance and memory goals are checked here, not in tests).

    python benchmarks/bench_reader_memory.py [--quick]
"""

from __future__ import annotations

import argparse
import gzip
import os
import subprocess
import sys
import tempfile
from pathlib import Path

# peak = VmHWM of /proc/self/status (ru_maxrss would carry the parent's peak across exec on Linux)
CHILD = r"""
import os, sys, gzip
def kib(key):
    for line in open("/proc/self/status"):
        if line.startswith(key):
            return int(line.split()[1])
mode, path = sys.argv[1], sys.argv[2]
base = kib("VmRSS:")
outcome = "read"
if mode == "oneshot":
    data = gzip.decompress(open(path, "rb").read())
    outcome = f"{len(data) / 1048576:.0f} MiB expanded"
else:
    from tumble.exceptions import PhotometryError
    from tumble.photometry import read_table
    base = kib("VmRSS:")
    try:
        read_table(path)
    except PhotometryError as exc:
        outcome = "refused: " + str(exc).split(": ", 1)[1][:60]
peak = kib("VmHWM:")
print(f"{(peak - base) / 1024:.1f}|{outcome}")
"""


def _run(mode: str, path: Path, cap_mb: float | None = None) -> tuple[float, str]:
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    if cap_mb is not None:
        env["TUMBLE_MAX_INPUT_MB"] = str(cap_mb)
    out = subprocess.run([sys.executable, "-c", CHILD, mode, str(path)], capture_output=True, text=True, env=env,
                         check=True).stdout.strip().splitlines()[-1]
    mib, outcome = out.split("|", 1)
    return float(mib), outcome


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="a 64 MiB bomb instead of 400 MiB")
    ap.add_argument("--bomb-mb", type=int, default=None, help="expanded size of the bomb, MiB")
    args = ap.parse_args()
    bomb_mb = args.bomb_mb or (64 if args.quick else 400)
    row = b"2460000.512345,15.123,0.012\n"
    with tempfile.TemporaryDirectory() as folder:
        bomb = Path(folder) / "bomb.csv.gz"
        body = b"jd,mag,err\n" + row * (bomb_mb * 1048576 // len(row))
        bomb.write_bytes(gzip.compress(body, compresslevel=9))
        big = Path(folder) / "big.csv"
        big.write_bytes(body[: 48 * 1048576])
        del body
        print(f"gzip bomb: {bomb.stat().st_size / 1024:.0f} kB on disk, {bomb_mb} MiB expanded")
        cases = [("one-shot gzip.decompress (before)", "oneshot", bomb, None),
                 ("tumble reader, default cap (64 MiB)", "tumble", bomb, None),
                 ("tumble reader, cap 16 MiB", "tumble", bomb, 16),
                 ("48 MiB plain file, cap 16 MiB", "tumble", big, 16),
                 ("48 MiB plain file, default cap (worst case)", "tumble", big, None)]
        results = []
        for label, mode, path, cap in cases:
            mib, outcome = _run(mode, path, cap)
            results.append(mib)
            print(f"{label:40s} peak +{mib:8.1f} MiB   {outcome}")
        if results[1] > 0:
            print(f"ratio one-shot / capped (default cap): {results[0] / results[1]:.2f}")
        if results[2] > 0:
            print(f"ratio one-shot / capped (16 MiB cap):  {results[0] / results[2]:.2f}")


if __name__ == "__main__":
    main()
