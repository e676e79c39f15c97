"""The app started as a new user starts it: the ``thermgui`` command with no arguments, a fresh
HOME (so fresh settings), on screens of 1366x768 and 1920x1080 (each its own Xvfb screen).

The window is looked at by tests/gui/start_as_user.py in the child process; the pictures land in
tests/_artifacts/first-start-*.png.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from .guikit import ARTIFACTS, ROOT

pytestmark = pytest.mark.gui
pyvirtualdisplay = pytest.importorskip("pyvirtualdisplay")

SCREENS = [(1366, 768), (1920, 1080)]


def start_as_user(tmp_path, size, *extra):
    home = tmp_path / "home"
    home.mkdir()
    report, shot = tmp_path / "report.json", ARTIFACTS / f"first-start-{size[0]}x{size[1]}{'-run' if extra else ''}.png"
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    env = {k: v for k, v in os.environ.items() if not k.startswith(("XDG_", "THERMGUI_"))}
    with pyvirtualdisplay.Display(backend="xvfb", size=size, color_depth=24) as disp:
        env.update(HOME=str(home), DISPLAY=f":{disp.display}", QT_QPA_PLATFORM="xcb")
        r = subprocess.run([sys.executable, str(ROOT / "tests" / "gui" / "start_as_user.py"), str(report), str(shot),
                            *extra], cwd=tmp_path, env=env, capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-3000:]
    assert "Traceback" not in r.stderr, r.stderr[-3000:]
    info = json.loads(report.read_text())
    # settings were written into the fresh HOME, not somewhere shared
    assert list(home.rglob("settings.ini"))
    return info


@pytest.mark.parametrize("size", SCREENS, ids=lambda s: f"{s[0]}x{s[1]}")
def test_first_start_shows_no_error_and_fits(tmp_path, size):
    info = start_as_user(tmp_path, size)
    assert info["message_boxes"] == []
    assert not info["error_shown"], info["error_text"]
    assert "cannot be opened" not in info["status_line"]
    assert "sample copy" in info["title"]
    # the window takes the screen (nothing falls off the bottom) and the 3D view most of it
    assert info["window"][0] <= size[0] and info["window"][1] <= size[1]
    assert info["window"][0] >= 0.9 * size[0] and info["window"][1] >= 0.85 * size[1]
    assert info["status_bar_on_screen"] and info["chart_on_screen"] and info["caution_on_screen"]
    assert info["toolbar_fits"]
    vw, vh = info["view"]
    assert vw * vh >= 0.33 * size[0] * size[1] and vh >= 0.45 * size[1], info
