"""``python -m tests.benchmarks`` (``make bench``): every ``bench_*.py`` module's ``main()``.

Modules run one after the other, in name order, each under a header; a module that
fails is reported and the others still run (the exit status is 1 then).
"""

from __future__ import annotations

import importlib
import sys
import time
import traceback
from pathlib import Path


def modules() -> list[str]:
    here = Path(__file__).resolve().parent
    return [f"{__package__}.{p.stem}" for p in sorted(here.glob("bench_*.py"))]


def main() -> int:
    failed = []
    for name in modules():
        print(f"\n{'=' * 78}\n{name}\n{'=' * 78}", flush=True)
        t = time.perf_counter()
        try:
            importlib.import_module(name).main()
        except Exception:  # noqa: BLE001 - report and run the next benchmark
            traceback.print_exc()
            failed.append(name)
        print(f"\n({name}: {time.perf_counter() - t:.0f} s)", flush=True)
    if failed:
        print(f"\nfailed: {', '.join(failed)}", file=sys.stderr)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
