"""DEVELOPERS.md stays true: the modules its architecture table names exist, the CLI
library and the metric count it states are the real ones."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

from floorcast.controller import metrics

ROOT = Path(__file__).resolve().parents[1]
GUIDE = (ROOT / "DEVELOPERS.md").read_text()
NUMBERS = {"five": 5, "six": 6, "seven": 7, "eight": 8, "nine": 9, "ten": 10, "eleven": 11,
           "twelve": 12}


def _architecture_rows() -> list[list[str]]:
    part = GUIDE.split("## Architecture", 1)[1].split("\n## ", 1)[0]
    return [
        [c.strip() for c in line.strip("|").split(" | ")]
        for line in part.splitlines()
        if line.startswith("| `")
    ]


def test_every_path_in_the_architecture_table_exists():
    rows = _architecture_rows()
    assert len(rows) >= 10
    for first, what, _rules in rows:
        named = re.findall(r"`([^`]+)`", first)
        base = ROOT / Path(named[0]).parent if "/" in named[0].rstrip("/") else ROOT
        for name in named:
            # Root-relative (`operator/floorcast/cli/`) or beside the row's first path.
            assert (ROOT / name).exists() or (base / name).exists(), f"{name} does not exist"
        # Modules listed inside the core/ row are files of core/.
        if named[0] == "operator/floorcast/core/":
            for mod in re.findall(r"`([a-z_]+(?:\.py|/))`", what):
                assert (ROOT / named[0] / mod).exists(), mod
        assert "later" not in what.split(), f"'later' in the row for {first}: it exists now"


def test_the_cli_library_named_is_the_dependency():
    deps = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["dependencies"]
    libs = {re.split(r"[<>=!~ \[]", d, maxsplit=1)[0].lower() for d in deps}
    (cli_row,) = [r for r in _architecture_rows() if r[0] == "`operator/floorcast/cli/`"]
    (named,) = re.findall(r"\((\w+)[;)]", cli_row[1])
    assert named in libs, (named, libs)


def test_the_metric_count_is_the_real_one():
    names = {m._name for m in vars(metrics).values() if hasattr(m, "_name")}
    (word,) = re.findall(r"the (\w+) `floorcast_\*` Prometheus metrics", GUIDE)
    assert NUMBERS[word] == len(names), (word, sorted(names))


def test_the_guide_speaks_to_any_contributor():
    text = GUIDE.lower()
    for phrase in ("our machines", "we developed", "developed on"):
        assert phrase not in text, phrase
