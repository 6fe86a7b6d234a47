"""The README promises exactly two commands; CI must run the second one (common practice, no source)."""
from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).parents[1]


def _first_two_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    head = text.split("\n## ", 1)[0]
    return [b.strip() for b in re.findall(r"```bash\n(.*?)```", head, flags=re.S)]


def test_readme_opens_with_a_paragraph_then_two_single_line_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    first_para = [p for p in text.split("\n\n") if p.strip() and not p.startswith("#")][0]
    assert len(first_para) > 400 and "emitter" in first_para
    blocks = _first_two_blocks()
    assert len(blocks) == 2
    assert all("\n" not in b for b in blocks)
    assert "choir serve scenarios/" in blocks[0]
    script = ROOT / blocks[1].lstrip("./")
    assert script.is_file() and "pytest" in script.read_text(encoding="utf-8")


def test_ci_runs_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert _first_two_blocks()[1] in ci


def test_demo_command_names_an_existing_scenario():
    demo = _first_two_blocks()[0]
    path = re.search(r"(scenarios/\S+\.json)", demo).group(1)
    assert (ROOT / path).is_file()
