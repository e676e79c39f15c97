"""Temporary results folders of unsaved models, and removing the ones a crashed session left."""
from __future__ import annotations

import shutil
import tempfile
import time
from pathlib import Path

TEMP_PREFIX = "thermgui-run-"  # temporary results folders of unsaved models
STALE_TEMP_S = 7 * 86400  # such folders left behind by a session that ended abnormally go after a week


def clean_stale_temp_runs(max_age_s: float = STALE_TEMP_S) -> list[Path]:
    """Remove temporary results folders of unsaved runs untouched for ``max_age_s`` seconds (left
    behind by sessions that ended abnormally); returns the folders removed."""
    gone = []
    now = time.time()
    try:
        roots = list(Path(tempfile.gettempdir()).glob(TEMP_PREFIX + "*"))
    except OSError:
        return gone
    for root in roots:
        try:
            newest = max([root.stat().st_mtime] + [p.stat().st_mtime for p in root.rglob("*")])
        except OSError:
            continue
        if root.is_dir() and now - newest > max_age_s:
            shutil.rmtree(root, ignore_errors=True)
            gone.append(root)
    return gone
