"""The README, followed literally: its set-up commands are the ones CI runs, and what it
promises (first paragraph, cautions, links, sample paths) is there and true.

Also keeps the built-in materials table in docs/model-format.md in step with
``solver/model/materials.py``: ``python3 tests/test_readme.py --write`` regenerates it.
"""
from __future__ import annotations

import re
import shlex
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
README = ROOT / "README.md"
CI_RUN = ROOT / ".ci" / "run"
MODEL_FORMAT = ROOT / "docs" / "model-format.md"
INSTALL = "bash tools/install.sh"


def readme_text() -> str:
    return README.read_text(encoding="utf-8")


def code_lines(markdown: str) -> list[str]:
    """Every command line in the Markdown: indented (4 spaces) or fenced code blocks."""
    lines, fenced = [], False
    for line in markdown.splitlines():
        if line.strip().startswith("```"):
            fenced = not fenced
            continue
        if fenced or line.startswith("    "):
            if line.strip():
                lines.append(line.strip())
    return lines


def setup_commands(markdown: str) -> list[str]:
    """The README's set-up commands: code lines that start with the install step."""
    return [c for c in code_lines(markdown) if c.startswith(INSTALL)]


def ci_steps() -> list[str]:
    """The commands .ci/run executes, in order (shell plumbing such as set/cd left out)."""
    steps = []
    for line in CI_RUN.read_text(encoding="utf-8").splitlines():
        s = line.strip()
        if not s or s.startswith("#") or s.startswith(("set ", "cd ")):
            continue
        steps.append(s)
    return steps


def first_paragraph(markdown: str) -> str:
    paragraphs = [p.strip() for p in re.split(r"\n\s*\n", markdown) if p.strip()]
    body = [p for p in paragraphs if not p.startswith("#")]
    return body[0]


# ------------------------------------------------------------------ set-up commands
def test_readme_has_exactly_two_setup_commands():
    cmds = setup_commands(readme_text())
    assert cmds == [f"{INSTALL} && thermgui", f"{INSTALL} && python3 -m pytest"], cmds


def test_test_command_is_what_ci_runs():
    """README's 'pass the tests' command, split at &&, is exactly the step list of .ci/run."""
    test_cmd = setup_commands(readme_text())[1]
    readme_steps = [s.strip() for s in test_cmd.split("&&")]
    assert readme_steps == ci_steps()


def test_run_command_installs_like_ci_then_starts_the_declared_program():
    run_cmd = setup_commands(readme_text())[0]
    install, start = [s.strip() for s in run_cmd.split("&&")]
    assert install == ci_steps()[0]
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    assert shlex.split(start)[0] in project["project"]["scripts"]


def test_thermgui_without_arguments_opens_the_default_sample(monkeypatch):
    """What `thermgui` does (the end of the first command), without opening a window."""
    import thermgui.app
    from solver.model.modelfile import load_model
    from thermgui.cli import main

    opened = []
    monkeypatch.setattr(thermgui.app, "run_app", lambda path: opened.append(Path(path)) or 0)
    assert main([]) == 0
    assert len(opened) == 1 and opened[0].is_file()
    assert opened[0].resolve() == (ROOT / "samples" / "outdoor_radio_box.json").resolve()
    assert load_model(opened[0]).parts


# ------------------------------------------------------------------ what the README says
def test_first_paragraph_states_the_job():
    text = first_paragraph(readme_text()).lower().replace("-", " ")
    for words in ("enclosure", "transient", "peak temperature", "rated", "engineer"):
        assert words in text, words


def test_cautions_are_present():
    text = " ".join(readme_text().lower().split())
    for phrase in ("engineering estimates", "confirm them by measurement", "safety standards",
                   "licensed practice", "touch temperature", "burn hazard"):
        assert phrase in text, phrase


def test_limitations_are_stated():
    text = " ".join(readme_text().lower().split())
    for phrase in ("conduction only", "no fluid flow", "convection coefficients", "radiation is not modelled",
                   "contact resistance", "do not change with temperature"):
        assert phrase in text, phrase


def test_links_and_images_point_to_files_that_exist():
    text = readme_text()
    targets = re.findall(r"\]\(([^)#\s]+)(?:#[^)]*)?\)", text)
    local = [t for t in targets if not re.match(r"^[a-z]+://", t)]
    assert "docs/model-format.md" in local and "docs/validation.md" in local
    for t in local:
        assert (ROOT / t).exists(), t


def test_sample_paths_named_in_the_readme_exist():
    names = set(re.findall(r"samples/[\w.-]+\.json", readme_text()))
    assert names, "the README names at least one sample"
    for n in names:
        assert (ROOT / n).is_file(), n


# ------------------------------------------------------------------ model format reference
def schema_fields() -> list[str]:
    """Every key of the model file, as ``section.key`` paths, from the schema classes."""
    from solver.model import modelfile as m

    sections = {"": m.Model, "parts": m.Part, "materials": m.MaterialSpec, "heat_loads": m.HeatLoad,
                "convection": m.Convection, "probes": m.Probe, "mesh": m.MeshSettings, "run": m.RunSettings,
                "profile constant": m.ConstantProfile, "profile step": m.StepProfile,
                "profile pulse": m.PulseProfile, "profile table": m.TableProfile}
    return [f"{sec}.{name}".lstrip(".") for sec, cls in sections.items() for name in cls.model_fields]


def test_model_format_reference_mentions_every_key():
    """A key added to the schema must be documented in docs/model-format.md."""
    doc = MODEL_FORMAT.read_text(encoding="utf-8")
    fields = schema_fields()
    assert len(fields) > 30
    missing = [f for f in fields if f"`{f.split('.')[-1]}`" not in doc and f'"{f.split(".")[-1]}"' not in doc]
    assert not missing, f"docs/model-format.md does not mention: {missing}"


# ------------------------------------------------------------------ materials table
BEGIN, END = "<!-- materials:begin -->", "<!-- materials:end -->"


def materials_table() -> str:
    from solver.model.materials import BUILTIN_MATERIALS

    rows = ["| name | conductivity W/(m·K) | density kg/m³ | specific heat J/(kg·K) | use | source |",
            "|---|---|---|---|---|---|"]
    for name, m in BUILTIN_MATERIALS.items():
        k = f"{m.conductivity[0]:g}" if m.isotropic else " / ".join(f"{v:g}" for v in m.conductivity)
        rows.append(f"| `{name}` | {k} | {m.density:g} | {m.specific_heat:g} | {m.note} | {m.source} |")
    return "\n".join(rows)


def documented_table(doc: str) -> str:
    start, end = doc.index(BEGIN) + len(BEGIN), doc.index(END)
    return doc[start:end].strip()


def test_materials_table_matches_the_library():
    doc = MODEL_FORMAT.read_text(encoding="utf-8")
    assert documented_table(doc) == materials_table(), \
        "docs/model-format.md is out of date: run `python3 tests/test_readme.py --write`"


if __name__ == "__main__":
    if sys.argv[1:] == ["--write"]:
        sys.path.insert(0, str(ROOT))
        doc = MODEL_FORMAT.read_text(encoding="utf-8")
        start, end = doc.index(BEGIN) + len(BEGIN), doc.index(END)
        MODEL_FORMAT.write_text(doc[:start] + "\n" + materials_table() + "\n" + doc[end:], encoding="utf-8")
        print(f"wrote the materials table into {MODEL_FORMAT}")
    else:
        print(materials_table())
