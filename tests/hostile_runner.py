"""Run prepared ``thermgui solve`` cases, each in a forked child under a memory and CPU cap.

    python tests/hostile_runner.py CASES.json RESULTS.json

The parent imports the program once; each child sets RLIMIT_AS (address space now + the cap) and
RLIMIT_CPU, runs the command line's ``main`` in-process with stderr captured, optionally reopens
the results folder, and reports its exit status. The parent records the child's wall time and
peak resident memory (``wait4``) for the summary; the tests assert exit status and message only.
"""
from __future__ import annotations

import io
import json
import os
import resource
import sys
import time


def _vm_size() -> int:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmSize:"):
                return int(line.split()[1]) * 1024
    return 0


def _child(case: dict, cap_bytes: int, cpu_s: int, result_path: str) -> None:
    limit = _vm_size() + cap_bytes
    resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    resource.setrlimit(resource.RLIMIT_CPU, (cpu_s, cpu_s))
    from thermgui.cli import main

    err = io.StringIO()
    sys.stderr = err
    out = {"rc": None, "err": "", "reopened": None}
    try:
        out["rc"] = main(["solve", case["model_path"], "--out", case["out"], "--quiet", *case.get("args", [])])
    except MemoryError:
        out["rc"] = "MemoryError"
    except SystemExit as e:  # argparse
        out["rc"] = e.code
    except BaseException as e:  # noqa: BLE001 - reported, the test fails on it
        out["rc"] = f"{type(e).__name__}: {e}"
    if case.get("reopen") and out["rc"] == 0:
        from solver.io.runfolder import load_run

        try:
            run = load_run(case["out"])
            out["reopened"] = len(run.times)
            run.field(len(run.times) - 1)
        except BaseException as e:  # noqa: BLE001
            out["reopened"] = f"{type(e).__name__}: {e}"
    out["err"] = err.getvalue()[-4000:]
    with open(result_path, "w") as fh:
        json.dump(out, fh)


def main(argv) -> int:
    cases_path, results_path = argv[1], argv[2]
    with open(cases_path) as fh:
        spec = json.load(fh)
    import solver.run.cli  # noqa: F401 - import once in the parent, children share it
    import thermgui.cli  # noqa: F401

    results = []
    for i, case in enumerate(spec["cases"]):
        rpath = f"{results_path}.{i}"
        t0 = time.perf_counter()
        pid = os.fork()
        if pid == 0:
            try:
                _child(case, spec["cap_bytes"], spec["cpu_s"], rpath)
            finally:
                os._exit(0)
        _, status, usage = os.wait4(pid, 0)
        wall = time.perf_counter() - t0
        try:
            with open(rpath) as fh:
                res = json.load(fh)
            os.unlink(rpath)
        except (OSError, ValueError):
            res = {"rc": f"child ended without a report (wait status {status})", "err": ""}
        res.update(name=case["name"], wall_s=wall, maxrss_mb=usage.ru_maxrss / 1024)
        results.append(res)
    with open(results_path, "w") as fh:
        json.dump(results, fh, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
