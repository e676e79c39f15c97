"""Hostile and unlucky input for ``thermgui solve``: over 150 generated cases (tests/hostile_cases.py).

All cases run in one helper process that forks a child per case under a memory cap (address
space of the loaded program + 768 MB, RLIMIT_AS) and a CPU cap (RLIMIT_CPU 60 s): a case that
allocates more fails with MemoryError or is killed, and its test fails. Each test asserts the exit
status (2 for refused input, naming the field; 0 for accepted extremes, whose folder must reopen).
Wall time and peak memory per case are printed (``-s``) for the record, not asserted.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from tests.hostile_cases import cases

ROOT = Path(__file__).resolve().parent.parent
CAP_BYTES = 768 * 1024 * 1024
CASES = cases()


def _setup_out(kind: str | None, out: Path) -> None:
    if kind in (None, "nested"):
        return
    if kind == "file":
        out.write_text("not a folder\n")
    elif kind == "under-file":
        out.parent.write_text("x")
    elif kind in ("foreign", "foreign-peaks"):
        out.mkdir()
        (out / ("notes.txt" if kind == "foreign" else "peaks.csv")).write_text("the user's own file\n")
    elif kind in ("locked-live", "locked-dead"):
        pid = os.getpid() if kind == "locked-live" else 4_194_304 + 77_777  # above Linux's largest pid
        out.parent.joinpath(f".{out.name}.lock").write_text(json.dumps(
            {"pid": pid, "host": os.uname().nodename, "started": "2026-01-01T00:00:00Z"}))


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    base = tmp_path_factory.mktemp("hostile")
    prepared = []
    for i, c in enumerate(CASES):
        d = base / f"c{i:03d}"
        d.mkdir()
        if "model" in c:
            mp = d / "model.json"
            mp.write_text(json.dumps(c["model"]))
        elif "text" in c:
            mp = d / "model.json"
            mp.write_bytes(c["text"])
        else:
            mp = Path(c["path"].replace("{tmp}", str(d)))
        out = d / "out"
        if c.get("out_setup") == "under-file":
            out = d / "afile" / "peaks.csv"
        if c.get("out_setup") == "nested":
            out = d / "new" / "a" / "b"
        _setup_out(c.get("out_setup"), out)
        prepared.append({"name": c["name"], "model_path": str(mp), "out": str(out), "args": c.get("args", []),
                         "reopen": c.get("reopen", False)})
    spec = base / "cases.json"
    spec.write_text(json.dumps({"cases": prepared, "cap_bytes": CAP_BYTES, "cpu_s": 60}))
    res_path = base / "results.json"
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    subprocess.run([sys.executable, str(ROOT / "tests" / "hostile_runner.py"), str(spec), str(res_path)],
                   check=True, env=env, cwd=str(ROOT), timeout=600)
    out = json.loads(res_path.read_text())
    worst_t = max(out, key=lambda r: r["wall_s"])
    worst_m = max(out, key=lambda r: r["maxrss_mb"])
    print(f"\n{len(out)} hostile cases: slowest {worst_t['wall_s']:.2f} s ({worst_t['name']}), "
          f"largest peak RSS {worst_m['maxrss_mb']:.0f} MB ({worst_m['name']})")
    return {"by_index": out, "dirs": [Path(p["out"]) for p in prepared]}


def test_enough_cases():
    assert len(CASES) >= 150


@pytest.mark.parametrize("index", range(len(CASES)), ids=[c["name"][:60] for c in CASES])
def test_case(results, index):
    case, res = CASES[index], results["by_index"][index]
    assert res["rc"] == case["rc"], f"{case['name']}: exit {res['rc']!r}, stderr: {res['err'][:600]}"
    if case["rc"] == 2:
        assert case["field"] in res["err"], f"{case['name']}: message does not name {case['field']!r}: {res['err'][:600]}"
        assert "internal error" not in res["err"] and "Traceback" not in res["err"]
        out = results["dirs"][index]
        if case.get("out_setup") is None:
            assert not out.exists(), "a refused run must write nothing"
            assert sorted(p.name for p in out.parent.iterdir()) == ["model.json"] or "path" in case
    if case.get("nothing_written"):
        assert not (results["dirs"][index].parents[2] / "new").exists(), "no folder is created for a refused run"
    if case.get("reopen"):
        assert isinstance(res["reopened"], int) and res["reopened"] >= 2, res["reopened"]
    if case.get("keeps"):
        assert (results["dirs"][index] / case["keeps"]).read_text() == "the user's own file\n"


def test_print_messages(results):  # pragma: no cover - a record for reviewers (shown with -s)
    for case, res in zip(CASES, results["by_index"]):
        if os.environ.get("HOSTILE_SHOW"):
            print(f"[{res['rc']}] {case['name'][:50]:<50} {res['wall_s']:.2f}s {res['maxrss_mb']:.0f}MB  "
                  f"{res['err'].strip()[:300]!r}")
    assert len(results["by_index"]) == len(CASES)
