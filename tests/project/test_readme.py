"""The README's quick start and the CI script must not drift apart."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _quick_start():
    text = (ROOT / "README.md").read_text()
    block = re.search(r"## Quick start\n+```(?:bash|sh)?\n(.*?)```", text, re.S)
    assert block, "README has a Quick start code block"
    return [line for line in block.group(1).splitlines() if line.strip()]


def test_readme_opens_with_one_paragraph_then_a_two_command_quick_start():
    text = (ROOT / "README.md").read_text()
    body = text.split("\n", 1)[1].lstrip("\n")  # after the title
    first_para, rest = body.split("\n\n", 1)
    assert len(first_para) > 200 and not first_para.startswith("#")
    assert rest.lstrip().startswith("## Quick start")
    assert len(_quick_start()) == 2


def test_ci_runs_the_readme_test_command_exactly():
    test_cmd = _quick_start()[1]
    ci = (ROOT / ".ci" / "run").read_text().splitlines()
    assert test_cmd in ci
    assert "pytest" in test_cmd
    assert any("ruff check" in line for line in ci)


def test_demo_command_names_a_shipped_experiment():
    demo = _quick_start()[0]
    files = re.findall(r"experiments/[\w.-]+\.toml", demo)
    assert files and all((ROOT / f).is_file() for f in files)


def test_readme_python_example_runs():
    """The README's Python tour must work as printed (the lines that need a finished run folder are
    left out)."""
    text = (ROOT / "README.md").read_text()
    code = re.search(r"## Python API\n+```python\n(.*?)```", text, re.S).group(1)
    lines = [ln for ln in code.splitlines() if "open_run" not in ln and "run.frame" not in ln]
    code = "\n".join(lines).replace("replications=2000", "replications=50").replace("periods=1000", "periods=100")
    exec(compile(code, "README.md", "exec"), {})
