"""Run every benchmark table: ``python -m benchmarks [NAME ...]`` (NAME as in benchmarks/bench_NAME.py)."""

import importlib
import pkgutil
import sys
import time

import benchmarks


def main(names: list[str]) -> int:
    found = sorted(m.name[len("bench_"):] for m in pkgutil.iter_modules(benchmarks.__path__)
                   if m.name.startswith("bench_"))
    unknown = [n for n in names if n not in found]
    if unknown:
        print(f"benchmarks: unknown name {unknown[0]!r}; expected one of {', '.join(found)}", file=sys.stderr)
        return 2
    for name in names or found:
        module = importlib.import_module(f"benchmarks.bench_{name}")
        print(f"\n== {name}: {module.__doc__.strip().splitlines()[0]}")
        t0 = time.perf_counter()
        module.run()
        print(f"({time.perf_counter() - t0:.1f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
