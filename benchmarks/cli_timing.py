"""Shared by the benchmarks: scenario files written as TOML, and a command timed as a user runs it.

``run_cli`` starts ``python -m samplewright ARGS`` (what the ``samplewright`` script runs) as a
child process and reports its wall time from start to exit and its own peak resident memory.
The child reads samplewright's compiled bytecode, as from an installed package (pip compiles it
at install; a source checkout caches it at first import): with ``PYTHONDONTWRITEBYTECODE`` set,
as on some machines, every child would otherwise compile the package's modules from source
(0.1-0.2 s of each start, which no user pays twice).
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    raise TypeError(f"no TOML form for {v!r}")


def toml_text(doc: dict) -> str:
    """A scenario dict as TOML: scalars first, then tables, then arrays of tables (``design``)."""
    lines: list[str] = []

    def table(d: dict, name: str | None):
        plain = {k: v for k, v in d.items() if not isinstance(v, dict) and not _tables(v)}
        if name is not None:
            lines.append(f"\n[{name}]")
        lines.extend(f"{k} = {_value(v)}" for k, v in plain.items())
        for k, v in d.items():
            if isinstance(v, dict):
                table(v, f"{name}.{k}" if name else k)
        for k, v in d.items():
            if _tables(v):
                for item in v:
                    lines.append(f"\n[[{name + '.' if name else ''}{k}]]")
                    lines.extend(f"{a} = {_value(b)}" for a, b in item.items())

    table(doc, None)
    return "\n".join(lines) + "\n"


def _tables(v) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def write_scenario(doc: dict, path: Path) -> Path:
    path.write_text(toml_text(doc))
    return path


_ENV: dict | None = None


def child_env() -> dict:
    """The environment of a timed child: this one, after samplewright's modules are compiled once into
    their ``__pycache__`` folders (ignored by git), which the child reads whether or not
    ``PYTHONDONTWRITEBYTECODE`` is set.  (``PYTHONPYCACHEPREFIX`` would not do: it moves the cache of
    every module, so the standard library and numpy would be compiled at each start instead.)"""
    global _ENV
    if _ENV is None:
        import atexit
        import os
        from importlib.util import find_spec

        package = Path(find_spec("samplewright").submodule_search_locations[0])
        before = set(package.rglob("*.pyc"))
        subprocess.run([sys.executable, "-m", "compileall", "-q", str(package)], check=True, stdout=subprocess.DEVNULL)
        # the files compiled here go when the benchmark ends: the checkout is left as it was (a test that counts
        # page faults in a child process sees another heap when samplewright's bytecode is cached)
        atexit.register(lambda: [f.unlink(missing_ok=True) for f in set(package.rglob("*.pyc")) - before])
        _ENV = dict(os.environ)
    return _ENV


def run_cli(args: list[str], log: Path, python: list[str] | None = None) -> dict:
    """``samplewright ARGS`` (or ``python`` + ARGS) in a child process: seconds start to exit, peak RSS,
    and the CPU seconds (user + system) of the child and the worker processes it waited for.

    The child runs under ``/usr/bin/time -f "%M %U %S"``, whose own ``wait4`` reads the child's
    peak resident memory: Linux carries the spawning process's high-water mark into a child
    spawned from it, so this (large) process's own ``RUSAGE_CHILDREN`` would over-count.  On a
    busy shared machine wall time stretches while CPU time stays near what the work costs, so
    both are kept.  The child's output goes to ``log``; a failing run raises with the log's tail.
    """
    rss = Path(str(log) + ".rss")
    cmd = ["/usr/bin/time", "-f", "%M %U %S", "-o", str(rss), *(python or [sys.executable, "-m", "samplewright"]),
           *args]
    with open(log, "w") as out:
        t = time.perf_counter()
        code = subprocess.run(cmd, check=False, stdout=out, stderr=subprocess.STDOUT, env=child_env()).returncode
        seconds = time.perf_counter() - t
    if code != 0:
        raise RuntimeError(f"{' '.join(cmd)} exited {code}\n{Path(log).read_text()[-2000:]}")
    peak, user, system = rss.read_text().split()[-3:]
    return {"seconds": round(seconds, 3), "peak_rss_mib": round(int(peak) / 1024, 1),
            "cpu_seconds": round(float(user) + float(system), 2)}


def save_results(res: dict, out) -> Path:
    """Note the load average at the end, write ``res`` as JSON to ``out`` (atomically) and say where."""
    import os

    from samplewright.files import write_json

    res["machine"]["load_average_at_end"] = os.getloadavg()[0]
    path = Path(out)
    path.parent.mkdir(parents=True, exist_ok=True)
    write_json(res, path)
    print(f"written to {path}")
    return path
