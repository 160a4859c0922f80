"""`make bench`: run every benchmark module in this folder and print its figures.

Each `bench_*.py` module has `run() -> str`, returning a Markdown fragment of
figures measured as ratios against a baseline run in the same process.
`python -m tests.bench assign` runs only the modules whose name contains 'assign'.
"""

import importlib
import pkgutil
import platform
import sys
import time

import tests.bench as package


def main(argv: list[str]) -> int:
    wanted = argv[1:]
    print(f"# sortition benchmarks\n\nmachine: {platform.machine()}, {platform.python_implementation()} "
          f"{platform.python_version()}, {platform.system()} {platform.release()}\n")
    for info in sorted(pkgutil.iter_modules(package.__path__), key=lambda m: m.name):
        if not info.name.startswith("bench_") or (wanted and not any(w in info.name for w in wanted)):
            continue
        module = importlib.import_module(f"tests.bench.{info.name}")
        started = time.perf_counter()
        print(module.run())
        print(f"({info.name}: {time.perf_counter() - started:.1f} s)\n", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
