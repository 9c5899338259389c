"""Import time of the first ``measure`` on a memoryless source, in a fresh interpreter.

Each repeat starts a new Python process (``subprocess``) that runs
``python -X importtime`` on::

    import zlib
    from pytest_ratefloor import ByteCodec, measure, sources
    measure(ByteCodec(<zlib level 6>, zlib.decompress), sources.uniform(256), n=1000,
            isolate=False)

(with compiled bytecode, as a user's interpreter has it) and sums the self
times of every module imported (everything the first
``measure`` needed: numpy, bitarray, the plugin's modules), and, for
reference, the same for ``import numpy`` alone in another fresh process. It
also reports whether ``scipy`` was imported (it must not be: no figure of a
memoryless source's ``measure`` needs it). Best of ``--repeat``.

Target: import time of the first ``measure`` < 100 ms. numpy's own import is
printed beside it: on a slow or busy machine it alone can take more than that,
and the plugin's share is the difference.

Run: ``python benchmarks/bench_import.py [--repeat 5]``.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile

FIRST_MEASURE = """
import sys, zlib
from pytest_ratefloor import ByteCodec, measure, sources
codec = ByteCodec(lambda data: zlib.compress(data, 6), zlib.decompress, name="zlib-6")
measure(codec, sources.uniform(256), n=1000, isolate=False)
print("scipy imported:", any(m == "scipy" or m.startswith("scipy.") for m in sys.modules))
"""

NUMPY_ALONE = "import numpy"


def _import_ms(code: str, env: dict[str, str]) -> tuple[float, str]:
    """(sum of the self import times in ms, the program's stdout) of one fresh run."""
    done = subprocess.run([sys.executable, "-X", "importtime", "-c", code], check=True,
                          capture_output=True, text=True, env=env)
    total_us = 0
    for line in done.stderr.splitlines():
        if line.startswith("import time:") and "|" in line:
            field = line.split(":", 1)[1].split("|")[0].strip()
            if field.isdigit():
                total_us += int(field)
    return total_us / 1000.0, done.stdout.strip()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    # as a user's interpreter runs: with compiled bytecode (kept in a temporary folder,
    # not in the checkout), even where PYTHONDONTWRITEBYTECODE is set
    cache = tempfile.mkdtemp(prefix="ratefloor-pycache-")
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    env["PYTHONPYCACHEPREFIX"] = cache
    _import_ms(FIRST_MEASURE, env)  # compiles everything once
    ours: list[float] = []
    numpy_only: list[float] = []
    said = ""
    for _ in range(args.repeat):  # interleaved
        ms, said = _import_ms(FIRST_MEASURE, env)
        ours.append(ms)
        numpy_only.append(_import_ms(NUMPY_ALONE, env)[0])
    print("first measure(ByteCodec(zlib), uniform(256), n=1000) in a fresh interpreter, "
          f"best of {args.repeat} (slowest in brackets)")
    print(f"  import time, everything it needed: {min(ours):7.1f} ms ({max(ours):.1f})")
    print(f"  import time, numpy alone:          {min(numpy_only):7.1f} ms "
          f"({max(numpy_only):.1f})")
    added = [a - b for a, b in zip(ours, numpy_only)]
    print(f"  added to numpy's (same repeat):    {min(added):7.1f} ms ({max(added):.1f})")
    print(f"  {said}")
    print(f"target: < 100 ms: {min(ours):.1f} ms in all, {min(added):.1f} ms beyond numpy")

if __name__ == "__main__":
    main()
