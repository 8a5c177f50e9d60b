"""Everything the README shows is run: its `floorcast ...` commands against the CLI
(in a temp dir holding the demo shop's files under the names the README uses), its
example policy and its forecast JSON example."""

from __future__ import annotations

import re
import shlex
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from floorcast import scenario
from floorcast.cli.main import app
from floorcast.policy import load_policy_file
from floorcast.sources.files import read_forecast

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()


def blocks(lang: str) -> list[str]:
    return re.findall(rf"```{lang}\n(.*?)```", README, flags=re.S)


def commands() -> list[str]:
    """Shell lines, continuation lines joined and trailing comments dropped."""
    out = []
    for block in blocks("sh"):
        for line in block.replace("\\\n", " ").splitlines():
            words = shlex.split(line, comments=True)
            if words:
                out.append(shlex.join(words))
    return out


def test_readme_keeps_the_two_setup_commands():
    assert commands()[:2] == ["make demo", "make test"]
    assert (ROOT / "docs" / "storefront-plan.png").exists()
    assert "docs/storefront-plan.png" in README


@pytest.fixture
def shop(tmp_path, monkeypatch):
    (tmp_path / "history").mkdir()
    for s in scenario.SERVICES:
        (tmp_path / "history" / f"{s.name}.csv").write_text(
            scenario.history_csv(s.name, step="5min")
        )
    shutil.copy(tmp_path / "history" / "storefront.csv", tmp_path / "storefront.csv")
    (tmp_path / "docs" / "examples").mkdir(parents=True)
    shutil.copy(ROOT / "docs" / "examples" / "policy.yaml", tmp_path / "docs" / "examples")
    monkeypatch.chdir(tmp_path)
    return tmp_path


def test_every_readme_floorcast_command_runs(shop):
    cmds = [c for c in commands() if c.startswith("floorcast ")]
    assert len(cmds) >= 5  # forecast (3), plan, backtest
    for cmd in cmds:
        r = CliRunner().invoke(app, shlex.split(cmd)[1:])
        assert r.exit_code == 0, f"{cmd}\n{r.output}"
    assert len(read_forecast(shop / "storefront-forecast.json")) == 288  # 24h at 5m
    assert (shop / "storefront.png").exists()
    assert "<html" in (shop / "storefront-backtest.html").read_text().lower()
    assert sorted(p.name for p in (shop / "forecasts").iterdir())


def test_readme_policy_example_parses():
    pol = load_policy_file(ROOT / "docs" / "examples" / "policy.yaml")
    assert pol.spec.mode in ("DryRun", "Enforce")
    assert "docs/examples/policy.yaml" in README


def test_readme_forecast_json_example_parses(tmp_path):
    (doc,) = blocks("json")
    (tmp_path / "f.json").write_text(doc)
    fc = read_forecast(tmp_path / "f.json")
    assert fc.unit == "cores" and len(fc) == 1
