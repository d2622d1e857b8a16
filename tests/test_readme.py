"""The README's tour code runs as printed, and the README says what the project requires."""

import re
from pathlib import Path

import pytest

README = Path(__file__).resolve().parent.parent / "README.md"


def test_readme_states_setup_and_caution():
    text = README.read_text(encoding="utf-8")
    assert 'python3 -m pip install . && slipnet demo' in text
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest' in text
    assert "support, never replace" in text and "licensed engineering practice" in text
    ci = (README.parent / ".ci" / "run").read_text(encoding="utf-8")
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest' in ci


@pytest.mark.slow
def test_readme_tour_runs(capsys):
    text = README.read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks, "the README should carry a Python tour"
    for code in blocks:
        exec(compile(code, str(README), "exec"), {"__name__": "readme_tour"})
    out = capsys.readouterr().out
    assert "grain" in out
