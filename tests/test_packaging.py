"""The container image recipe and the wheel it installs.

The image itself is built and run by e2e/test_image.py (buildah, no Docker engine).
What is checked here, without building: the Dockerfile's final stage
runs as a non-root user with `floorcast run` as its entrypoint and installs without
dev extras, and the wheel `pip install .` would install carries the code and the
package data the operator and the demo need.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
import zipfile
from email.parser import Parser
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _final_stage(text: str) -> list[str]:
    lines = [ln.strip() for ln in text.splitlines() if ln.strip() and not ln.startswith("#")]
    froms = [i for i, ln in enumerate(lines) if ln.upper().startswith("FROM ")]
    assert len(froms) >= 2, "the Dockerfile should be multi-stage"
    return lines[froms[-1] :]


def test_dockerfile_final_stage_is_non_root_with_run_entrypoint() -> None:
    text = (ROOT / "Dockerfile").read_text()
    final = _final_stage(text)
    users = [ln.split(None, 1)[1] for ln in final if ln.upper().startswith("USER ")]
    assert users, "the final stage declares no USER"
    uid = users[-1].split(":")[0]
    # Kubernetes docs, "Configure a Security Context for a Pod or Container": with
    # runAsNonRoot the kubelet refuses a non-numeric USER it cannot verify, and UID 0.
    assert uid.isdigit() and int(uid) != 0
    entry = [ln.split(None, 1)[1] for ln in final if ln.upper().startswith("ENTRYPOINT ")]
    assert entry and json.loads(entry[-1]) == ["floorcast", "run"]
    # Build tools stay in the build stage: the final stage only copies the venv.
    assert any(ln.startswith("COPY --from=build /opt/floorcast") for ln in final)
    assert not any("pip install" in ln for ln in final)


def test_dockerfile_installs_without_dev_extras() -> None:
    text = (ROOT / "Dockerfile").read_text()
    installs = [ln for ln in text.splitlines() if "pip install" in ln and "--upgrade pip" not in ln]
    assert installs and all("[dev]" not in ln for ln in installs)
    assert any(ln.rstrip(" \\").endswith("pip install .") for ln in installs)


def test_dockerignore_keeps_the_build_context_small() -> None:
    rules = [
        ln.strip()
        for ln in (ROOT / ".dockerignore").read_text().splitlines()
        if ln.strip() and not ln.startswith("#")
    ]
    assert rules[0] == "**"
    reincluded = {r[1:].rstrip("/") for r in rules if r.startswith("!")}
    assert reincluded == {"pyproject.toml", "README.md", "LICENSE", "operator"}


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    # Built from a copy holding exactly the files .dockerignore lets into the image's
    # build context, so a file the build needs but the context lacks fails here, and
    # the shared source tree gets no build/ folder.
    context = tmp_path_factory.mktemp("context")
    for name in ("pyproject.toml", "README.md", "LICENSE"):
        shutil.copy2(ROOT / name, context / name)
    skip = shutil.ignore_patterns("__pycache__", "*.pyc", "*.egg-info")
    shutil.copytree(ROOT / "operator", context / "operator", ignore=skip)
    out = tmp_path_factory.mktemp("wheel")
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", str(context), "-w", str(out)],
        check=True,
        cwd=out,
    )
    (built,) = out.glob("floorcast-*.whl")
    return built


def test_wheel_contains_operator_code_and_shop_data(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    for module in (
        "floorcast/cli/main.py",
        "floorcast/cli/run.py",
        "floorcast/cli/forecast.py",
        "floorcast/controller/app.py",
        "floorcast/controller/handlers.py",
        "floorcast/kube/hpa.py",
        "floorcast/policy.py",
    ):
        assert module in names, module
    shop = {Path(n).name for n in names if n.startswith("floorcast/data/shop/")}
    expected = {p.name for p in (ROOT / "operator/floorcast/data/shop").glob("*.yaml")}
    assert expected and expected <= shop
    assert not any(n.startswith(("tests/", "e2e/")) for n in names)


def test_wheel_metadata_has_entry_point_and_no_dev_requirements(wheel: Path) -> None:
    z = zipfile.ZipFile(wheel)
    info = next(n.split("/")[0] for n in z.namelist() if n.endswith(".dist-info/METADATA"))
    entry = z.read(f"{info}/entry_points.txt").decode()
    assert "floorcast = floorcast.cli.main:main" in entry
    meta = Parser().parsestr(z.read(f"{info}/METADATA").decode())
    requires = meta.get_all("Requires-Dist") or []
    unconditional = {r.split(";")[0].split(">")[0].split("=")[0].strip().lower()
                     for r in requires if "extra ==" not in r}  # fmt: skip
    assert {"kopf", "kubernetes", "prometheus-client"} <= unconditional
    assert "pytest" not in unconditional and "statsmodels" not in unconditional
