"""The README's parameter table is the schema's, and its commands exist."""

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))

from param_table import BEGIN, END, table  # noqa: E402


def test_readme_parameter_table_matches_the_schema():
    text = (ROOT / "README.md").read_text()
    start, end = text.index(BEGIN), text.index(END) + len(END)
    assert text[start:end] == table(), "run scripts/param_table.py and paste its output into README.md"


def test_readme_has_the_safety_note_and_two_setup_commands():
    text = (ROOT / "README.md").read_text()
    assert "## Listening safety" in text and "85 dBA" in text and "H.870" in text and "-1 dBFS" in text
    block = text.split("## Set up and run", 1)[1].split("```sh", 1)[1].split("```", 1)[0]
    assert [line.split()[0] for line in block.strip().splitlines()] == ["scripts/run", "scripts/test"]
    commands = [ln for ln in (ROOT / ".ci" / "run").read_text().splitlines() if ln and not ln.startswith("#")]
    assert commands[-1].endswith("scripts/test")
