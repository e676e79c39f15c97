"""Regenerate docs/screenshot-editing.png and docs/screenshot-results.png from a clean start.

    python3 tests/gui/docs_screenshots.py

Each picture comes from the app started as a user starts it (tests/gui/start_as_user.py) with a
fresh HOME in a temporary folder (paths under it show as ``~/...``) on its own 1366x768 Xvfb
screen: the editing view of the bundled radio box with the radio module selected, and a finished
run of the bundled power stage saved to ``~/Documents/power-stage/``, shown at the peak of the
part that goes over its rating.
The script refuses to write a picture if the app showed an error or a message box.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import pyvirtualdisplay

ROOT = Path(__file__).resolve().parents[2]
SIZE = (1366, 768)


def shoot(out: Path, *args) -> dict:
    with tempfile.TemporaryDirectory(prefix="thermgui-docs-") as tmp:
        home = Path(tmp) / "home"
        home.mkdir()
        report = Path(tmp) / "report.json"
        env = {k: v for k, v in os.environ.items() if not k.startswith(("XDG_", "THERMGUI_"))}
        with pyvirtualdisplay.Display(backend="xvfb", size=SIZE, color_depth=24) as disp:
            env.update(HOME=str(home), DISPLAY=f":{disp.display}", QT_QPA_PLATFORM="xcb", PYTHONPATH=str(ROOT))
            r = subprocess.run([sys.executable, str(ROOT / "tests" / "gui" / "start_as_user.py"), str(report),
                                str(out), *args], cwd=home, env=env, capture_output=True, text=True, timeout=900)
        if r.returncode != 0:
            raise SystemExit(r.stderr[-3000:])
        info = json.loads(report.read_text())
    if info["message_boxes"] or info["error_shown"]:
        out.unlink(missing_ok=True)
        raise SystemExit(f"{out.name}: the app showed an error: {info['message_boxes'] or info['error_text']}")
    return info


if __name__ == "__main__":
    docs = ROOT / "docs"
    info = shoot(docs / "screenshot-editing.png", "--select", "radio module")
    print("editing:", info["title"], info["status_line"])
    info = shoot(docs / "screenshot-results.png", "--open", str(ROOT / "samples" / "compact_power_stage.json"),
                 "--save-as", "Documents/power-stage/compact_power_stage.json", "--run", "--at-peak", "Q2 die")
    print("results:", info["title"], info["status_line"])
