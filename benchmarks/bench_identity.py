"""Cost of identifying a snapshot file for the resume manifest (``rtrace.run.manifest.snapshot_identity``).

Writes a file of random bytes (default 1 GiB) in a temporary folder and times, over several rounds:
the whole-file SHA-256 (what files up to 256 MiB get), and the sampled hash larger files get, each
with the file in the page cache (warm) and after asking the kernel to drop it (cold:
``posix_fadvise(DONTNEED)``, honoured for clean pages of a file the user owns). Prints medians and
ranges. Usage: ``python benchmarks/bench_identity.py [size in MiB] [rounds]``.
"""

import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

from rtrace.run.manifest import snapshot_identity


def _drop(path):
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
        os.posix_fadvise(fd, 0, 0, os.POSIX_FADV_DONTNEED)
    finally:
        os.close(fd)


def _time(func, rounds, before=None):
    times = []
    for _ in range(rounds):
        if before:
            before()
        t0 = time.perf_counter()
        func()
        times.append(time.perf_counter() - t0)
    return times


def _say(label, times):
    print(
        f"{label:<38} median {statistics.median(times):8.4f} s  [{min(times):.4f}-{max(times):.4f}]  "
        f"({len(times)} rounds)"
    )


def main(size_mib=1024, rounds=5):
    with tempfile.TemporaryDirectory(prefix="rtrace-bench-") as folder:
        path = Path(folder) / "snapshot.bin"
        with open(path, "wb") as handle:
            for _ in range(size_mib):
                handle.write(os.urandom(1 << 20))
        size = path.stat().st_size
        print(f"file: {size / 2**30:.3f} GiB")
        full = lambda: snapshot_identity(path, full_limit=size)  # noqa: E731
        sampled = lambda: snapshot_identity(path, full_limit=0)  # noqa: E731
        full()  # into the page cache
        _say("whole-file SHA-256, warm", _time(full, rounds))
        _say("sampled (18 MiB), warm", _time(sampled, rounds))
        _say("whole-file SHA-256, cold", _time(full, rounds, lambda: _drop(path)))
        _say("sampled (18 MiB), cold", _time(sampled, rounds, lambda: _drop(path)))


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
