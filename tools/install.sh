#!/usr/bin/env bash
# Installs everything thermgui needs on a bare Debian/Ubuntu machine (apt + pip), then the
# project itself in editable mode with its test extras. Safe to run again.
set -euo pipefail
cd "$(dirname "$0")/.."
if command -v apt-get >/dev/null 2>&1 && [ "$(id -u)" = "0" ]; then
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq
  # OpenGL (software rendering), fonts, X client libraries for Qt's xcb platform, and Xvfb for tests
  apt-get install -y -qq --no-install-recommends \
    libgl1 libegl1 libgl1-mesa-dri libglib2.0-0 libfontconfig1 libxkbcommon0 libdbus-1-3 \
    xvfb xauth libxcb-cursor0 libxcb-icccm4 libxcb-image0 libxcb-keysyms1 libxcb-render-util0 \
    libxcb-shape0 libxcb-xkb1 libxkbcommon-x11-0 libxcursor1 fonts-dejavu-core >/dev/null
fi
PY=${PYTHON:-python3}
"$PY" -m pip install -q --disable-pip-version-check -e '.[test]'
