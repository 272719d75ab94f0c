"""Every view's examples in any install: the examples are package data, and a wheel serves them.

The page's views (other than the comparison's ``/v1/demo`` start) start from the example request
bodies listed in ``/openapi.json``. They live in ``service/dualcost/examples/`` as package data;
the repository's top-level ``openapi_examples/`` (the folder the README's commands send files
from) is a link to that folder, so there is one copy and nothing to keep in step.

The wheel test builds the project as ``pip wheel --no-deps`` builds it for anyone (pip's build
isolation fetches the build backend named in pyproject.toml, as ``.ci/run``'s install does),
installs the wheel into a fresh virtual environment with ``pip install --no-deps --no-index``
(the dependencies come from the running interpreter's site-packages, added as a path only), starts
``dualcost serve`` from that environment in a temporary folder with no PYTHONPATH, and reads
back every example. It takes some 30 seconds: building a wheel is what it checks.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import sysconfig
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.api.examples import DERIVED
from dualcost.config import Settings
from tests.conftest import EXAMPLES, ROOT, free_port

PACKAGE_EXAMPLES = ROOT / "service" / "dualcost" / "examples"


def _clean_env(**extra: str) -> dict[str, str]:
    """The environment without anything that would import the checkout instead of the wheel."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("PYTHONPATH", "PYTHONHOME") and not k.startswith("DUALCOST_")}
    return {**env, "PYTHONNOUSERSITE": "1", **extra}


def test_openapi_examples_is_the_package_folder_itself() -> None:
    """openapi_examples/ holds exactly the package's examples, byte for byte (it is a link)."""
    assert EXAMPLES.resolve() == PACKAGE_EXAMPLES.resolve()
    top = {p.name: p.read_bytes() for p in EXAMPLES.glob("*.json")}
    package = {p.name: p.read_bytes() for p in PACKAGE_EXAMPLES.glob("*.json")}
    assert top == package and len(package) > 20


def test_the_default_settings_read_the_package_examples() -> None:
    assert Settings().examples_dir.resolve() == PACKAGE_EXAMPLES.resolve()


@pytest.fixture(scope="module")
def wheel_service(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Path]]:
    """``dualcost serve`` run from a wheel installed in a fresh venv; its URL and the venv."""
    tmp = tmp_path_factory.mktemp("wheel")
    src = tmp / "src"
    src.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy(ROOT / name, src / name)
    shutil.copytree(ROOT / "service", src / "service",
                    ignore=shutil.ignore_patterns("__pycache__", "*.egg-info", "*.pyc"))
    env = _clean_env()
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(tmp / "dist"),
                    str(src)], check=True, env=env, cwd=tmp, timeout=600)
    wheel = next((tmp / "dist").glob("dualcost-*.whl"))
    venv = tmp / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(venv)], check=True, env=env,
                   timeout=120)
    python = venv / "bin" / "python"
    subprocess.run([sys.executable, "-m", "pip", "--python", str(python), "install", "--no-deps",
                    "--no-index", "-q", str(wheel)], check=True, env=env, cwd=tmp, timeout=300)
    # The dependencies: the running interpreter's site-packages as a plain path (its .pth files,
    # such as an editable install of the checkout, are not run from there).
    where = "import sysconfig; print(sysconfig.get_paths()['purelib'])"
    site = Path(subprocess.run([str(python), "-c", where], check=True, capture_output=True, text=True,
                               env=env).stdout.strip())
    (site / "zz_shared_dependencies.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    port = free_port()
    data = tmp / "data"
    data.mkdir()
    with (tmp / "serve.log").open("wb") as log:  # the child keeps its own copy of the handle
        server = subprocess.Popen([str(venv / "bin" / "dualcost"), "serve", "--host", "127.0.0.1",
                                   "--port", str(port), "--workers", "1", "--log-level", "warning"],
                                  cwd=tmp, env=_clean_env(DUALCOST_DATA_DIR=str(data)),
                                  stdout=subprocess.DEVNULL, stderr=log)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            assert server.poll() is None, (tmp / "serve.log").read_text(errors="replace")
            try:
                if httpx.get(f"{url}/health", timeout=2).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            assert time.monotonic() < deadline, "the service installed from the wheel did not start"
            time.sleep(0.2)
        yield url, venv
    finally:
        server.terminate()
        try:
            server.wait(timeout=20)
        except subprocess.TimeoutExpired:
            server.kill()
            server.wait()


def test_the_wheel_is_what_runs(wheel_service: tuple[str, Path]) -> None:
    """The service imported dualcost from the venv, not from the checkout."""
    _, venv = wheel_service
    out = subprocess.run([str(venv / "bin" / "python"), "-c",
                          "import dualcost, dualcost.config as c; print(dualcost.__file__); "
                          "print(c.Settings().examples_dir)"],
                         check=True, capture_output=True, text=True, env=_clean_env(), cwd=venv)
    module, examples = out.stdout.split()
    assert Path(module).resolve().is_relative_to(venv.resolve())
    assert Path(examples).resolve().is_relative_to(venv.resolve())


def test_a_wheel_serves_every_example_the_views_start_from(wheel_service: tuple[str, Path]) -> None:
    """Every file of openapi_examples/ is in the installed service's /openapi.json, under its
    operation, with the same body; the page and the comparison's demo start are served too."""
    url, _ = wheel_service
    doc = httpx.get(f"{url}/openapi.json", timeout=30).json()
    served: dict[str, dict[str, object]] = {}
    for item in doc["paths"].values():
        for op in item.values():
            found = op.get("requestBody", {}).get("content", {}).get("application/json", {})
            if "examples" in found:
                served[op["operationId"]] = found["examples"]
    files = sorted(EXAMPLES.glob("*.json"))
    assert files
    for path in files:
        operation, name = path.name.split(".")[0], path.name.split(".")[1]
        assert operation in served, f"{operation}: no examples served from the wheel"
        assert served[operation][name]["value"] == json.loads(path.read_text(encoding="utf-8")), path.name
    for derived, (source, _) in DERIVED.items():
        assert served.get(derived), f"{derived} shows {source}'s examples"
    for page in ("/", "/static/views.js", "/static/views_more.js", "/static/vendor/chart.umd.min.js"):
        assert httpx.get(f"{url}{page}", timeout=30).status_code == 200, page
    assert httpx.get(f"{url}/v1/demo", timeout=30).status_code == 200


def test_a_wheel_computes_an_example_a_view_starts_from(wheel_service: tuple[str, Path]) -> None:
    """One example POSTed to the installed service gives the answer the checkout gives."""
    url, _ = wheel_service
    body = json.loads((EXAMPLES / "indexSeries.wrenmouth_monthly_ces.json").read_text(encoding="utf-8"))
    r = httpx.post(f"{url}/v1/index-series", json=body, timeout=60)
    assert r.status_code == 200, r.text
    here = TestClient(create_app(Settings(examples_dir=EXAMPLES))).post("/v1/index-series", json=body)
    assert r.json()["formulas"] == here.json()["formulas"]
