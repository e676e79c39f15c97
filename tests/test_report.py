"""The design-review report (`thermgui report RESULTS_DIR -o FILE.html`, NOTES.md §4 additions):
one self-contained HTML file from a finished run; exit 2 and nothing written for a folder that is
not a complete results folder, with "incomplete" in the message when the run was cut short.

The run is the engine's own output for an invented chip-on-plate scenario; the HTML is read back
with the standard library's html.parser, the embedded pictures with matplotlib's PNG reader.
"""
from __future__ import annotations

import base64
import csv
import io
import json
import os
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest

from modelkit import chip_on_plate
from solver.run.cli import solve_to_folder
from solver.model.modelfile import parse_model, save_model
from solver.io.runstore import record_edits
from runfolderkit import to_legacy_layout

ROOT = Path(__file__).resolve().parent.parent


class Page(HTMLParser):
    """Tables (rows of cell texts, with the row's class), image sources, links, all text."""

    def __init__(self):
        super().__init__()
        self.tables, self.images, self.links, self.text = [], [], [], []
        self._cell = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "table":
            self.tables.append([])
        elif tag == "tr" and self.tables:
            self.tables[-1].append((a.get("class", ""), []))
        elif tag in ("td", "th"):
            self._cell = []
        elif tag == "img":
            self.images.append(a.get("src", ""))
        elif tag in ("link", "script") or (tag == "a" and "href" in a):
            self.links.append((tag, a))

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self.tables and self.tables[-1]:
            self.tables[-1][-1][1].append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def read_page(path) -> Page:
    p = Page()
    p.feed(Path(path).read_text(encoding="utf-8"))
    return p


def cli(*args, env=None):
    return subprocess.run([sys.executable, "-m", "thermgui", *args], cwd=ROOT, capture_output=True, text=True,
                          timeout=300, env={**os.environ, "PYTHONPATH": str(ROOT), **(env or {})})


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    """A finished run (10 min, the chip over its rating) with the engine's accuracy record
    (run.json `accuracy`); the error bands in peaks.csv are set by hand so that one part is at risk."""
    base = tmp_path_factory.mktemp("report")
    model = base / "chip.json"
    save_model(parse_model(chip_on_plate(duration_s=600.0, step_s=5.0, output_every_s=60.0)), model)
    out = base / "chip.results"
    assert solve_to_folder(model, out, quiet=True) == 0
    with open(out / "peaks.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    head = rows[0]
    by = {r[0]: r for r in rows[1:]}
    by["chip"][head.index("peak_error_k")] = "1.30"
    by["plate"][head.index("peak_error_k")] = f"{float(by['plate'][head.index('margin_k')]) + 1.0:.2f}"
    by["plate"][head.index("status")] = "at-risk"
    with open(out / "peaks.csv", "w", newline="") as fh:
        csv.writer(fh).writerows(rows)
    record_edits(out, ["peaks.csv"])  # else the edited table is the user's and the folder reads as changed
    return base, out, by, head


def test_report_is_one_file_with_everything(finished):
    base, out, by, head = finished
    target = base / "review.html"
    r = cli("report", str(out), "-o", str(target))
    assert r.returncode == 0, r.stderr
    assert str(target) in r.stdout
    page = read_page(target)
    text = " ".join(page.text)
    # self-contained: no links, scripts or external pictures; every picture is an inline PNG
    assert page.links == []
    assert page.images and all(s.startswith("data:image/png;base64,") for s in page.images)
    import matplotlib.image as mpimg

    for src in page.images:
        img = mpimg.imread(io.BytesIO(base64.b64decode(src.split(",", 1)[1])), format="png")
        assert img.shape[0] > 40 and img.shape[1] > 100 and img.std() > 0.01  # a drawn picture, not blank
    # the peak table: review order, verdicts, error band, rows classed for colour
    peak_table = next(t for t in page.tables if t and t[0][1][:2] == ["Part", "Verdict"])
    body = peak_table[1:]
    assert [cells[0] for _, cells in body] == ["chip", "plate", "foot"]
    assert [cls for cls, _ in body] == ["over", "at-risk", "unrated"]
    assert body[0][1][1] == "OVER" and body[1][1][1] == "AT RISK"
    assert body[0][1][3] == f"{float(by['chip'][head.index('peak_c')]):.1f} ± 1.3"
    assert "Peak at (min)" in peak_table[0][1]
    # the accuracy record, the model with material sources, the energy balance, the caution
    record = json.loads((out / "run.json").read_text())["accuracy"]
    assert record and record["levels"]
    assert "Mesh-independence record" in text
    assert f"{record['levels'][-1]['nodes']:,}" in text and record["stop_reason"] in text
    assert "Incropera" in text  # aluminium-6061's source in the built-in library
    assert "mould-compound" in text and "underside" in text
    energy = next(t for t in page.tables if t and t[0][1][0] == "Heat in")
    assert energy[0][1][1] == "0.9 kJ"  # 1.5 W for 600 s
    assert "engineering estimates" in text and "measurement on real hardware" in text
    assert "At the hottest moment" in text and "chip at t = 10 min" in text
    # written as an ordinary file, nothing else left beside it
    assert sorted(p.name for p in base.iterdir()) == ["chip.json", "chip.results", "review.html"]


def test_report_without_accuracy_record_says_so(finished, tmp_path):
    _, out, _, _ = finished
    copy = tmp_path / "plain.results"
    shutil.copytree(out, copy)
    info = json.loads((copy / "run.json").read_text())
    del info["accuracy"]
    (copy / "run.json").write_text(json.dumps(info))
    record_edits(copy, ["run.json"])
    r = cli("report", str(copy), "--no-pictures")
    assert r.returncode == 0, r.stderr
    target = tmp_path / "plain.results-report.html"  # the default: beside the folder
    text = " ".join(read_page(target).text)
    assert "No mesh-independence record" in text and "At the hottest moment" in text
    assert "3D pictures were not asked for" in text


@pytest.mark.parametrize("cut", ["frames only", "last output missing"])
def test_incomplete_folder_exit_2_nothing_written(finished, tmp_path, cut):
    _, out, _, _ = finished
    folder = tmp_path / "cut.results"
    shutil.copytree(out, folder)
    if cut == "frames only":  # what a stopped run leaves: frames, none of the closing files
        for n in ("run.json", "peaks.csv", "history.csv"):
            (folder / n).unlink()
    else:  # the series ends before the model's duration (as if the last outputs were never written)
        info = json.loads((folder / "run.json").read_text())
        info["model"]["run"]["duration_s"] = 2 * float(info["model"]["run"]["duration_s"])
        (folder / "run.json").write_text(json.dumps(info))
        record_edits(folder, ["run.json"])
    before = sorted(p.name for p in tmp_path.rglob("*"))
    target = tmp_path / "r.html"
    r = cli("report", str(folder), "-o", str(target))
    assert r.returncode == 2
    assert "incomplete" in r.stderr and str(folder) in r.stderr
    assert "Traceback" not in r.stderr
    assert not target.exists() and sorted(p.name for p in tmp_path.rglob("*")) == before


def test_a_killed_first_run_is_incomplete(tmp_path):
    """A first run killed while solving leaves only its staging folder beside the name it was given."""
    folder = tmp_path / "killed.results"
    staging = tmp_path / ".killed.results.staging-4194999"  # a pid above Linux's largest: the run is gone
    staging.mkdir()
    (staging / ".thermgui-staging").write_text(json.dumps({"pid": 4_194_999, "host": os.uname().nodename,
                                                          "started": "2026-01-01T00:00:00Z"}))
    target = tmp_path / "r.html"
    r = cli("report", str(folder), "-o", str(target))
    assert r.returncode == 2 and "incomplete" in r.stderr and "cut short" in r.stderr and str(folder) in r.stderr
    assert "Traceback" not in r.stderr and not target.exists()


def test_a_folder_of_the_pvd_layout_is_reported_with_a_note(finished, tmp_path):
    _, out, _, _ = finished
    old = tmp_path / "old.results"
    shutil.copytree(out, old)
    to_legacy_layout(old)
    target = tmp_path / "r.html"
    r = cli("report", str(old), "-o", str(target), "--no-pictures")
    assert r.returncode == 0, r.stderr
    assert "note:" in r.stderr and "field.pvd layout" in r.stderr
    text = " ".join(read_page(target).text)
    assert "Note on the results folder" in text and "At the hottest moment" in text


def test_a_truncated_field_file_is_refused(finished, tmp_path):
    _, out, _, _ = finished
    cut = tmp_path / "cut.results"
    shutil.copytree(out, cut)
    data = (cut / "field.vtkhdf").read_bytes()
    (cut / "field.vtkhdf").write_bytes(data[: len(data) // 2])
    target = tmp_path / "r.html"
    r = cli("report", str(cut), "-o", str(target))
    assert r.returncode == 2 and "field.vtkhdf" in r.stderr and "truncated" in r.stderr
    assert "Traceback" not in r.stderr and not target.exists()


@pytest.mark.parametrize("which", ["a model folder", "no such folder", "a file"])
def test_not_a_results_folder_exit_2(tmp_path, which):
    path = {"a model folder": ROOT / "samples", "no such folder": tmp_path / "nothing",
            "a file": ROOT / "samples" / "outdoor_radio_box.json"}[which]
    target = tmp_path / "r.html"
    r = cli("report", str(path), "-o", str(target))
    assert r.returncode == 2
    assert "not a results folder" in r.stderr and "Traceback" not in r.stderr
    assert not target.exists() and list(tmp_path.iterdir()) == []


def test_report_builder_is_qt_free(finished, tmp_path):
    _, out, _, _ = finished
    code = ("import sys\n"
            "from thermgui.report import write_report\n"
            f"write_report({str(out)!r}, {str(tmp_path / 'q.html')!r}, pictures=False)\n"
            "print(sorted(m for m in sys.modules if m.startswith(('PySide6', 'shiboken6', 'pyvistaqt'))))\n")
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=300,
                       env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip() == "[]"
    assert (tmp_path / "q.html").stat().st_size > 10000
