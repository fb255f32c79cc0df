"""A non-editable install from a built wheel serves the pages and the static files.

The wheel is built from a copy of the source tree (so the checkout gets no build/ folder), then
installed with ``--no-deps`` into a fresh virtualenv. That virtualenv reaches the dependencies
through a .pth file naming the site-packages of the interpreter running the tests (the shared
or CI virtualenv), so nothing is downloaded beyond the build requirements from the package index.
The test then checks that ``server`` really comes from the new virtualenv, runs
``remanence init`` and ``remanence serve`` there, outside the repository, and fetches ``/login``,
a stylesheet, the vendored htmx, the offline API documentation page and its Swagger UI bundle.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import sysconfig
import time
from pathlib import Path

import httpx
import pytest

from server.api.docs_page import SWAGGER_UI_DIR
from server.package_files import BUNDLED_FOLDERS

REPO = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.slow

# Not part of a source distribution: version control, environments, local data, build output.
IGNORED = shutil.ignore_patterns(".git", ".venv", "var", "build", "dist", "*.egg-info", "__pycache__",
                                 ".pytest_cache", "screenshots", "node_modules")


def _run(cmd: list[str], env: dict, cwd: Path, timeout: float = 300) -> str:
    done = subprocess.run(cmd, env=env, cwd=cwd, capture_output=True, text=True, timeout=timeout)
    assert done.returncode == 0, f"{' '.join(map(str, cmd))} failed ({done.returncode}):\n{done.stdout}\n{done.stderr}"
    return done.stdout


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    """(venv folder, environment for its commands) with the wheel of this checkout installed."""
    tmp = tmp_path_factory.mktemp("wheel")
    src, dist, venv = tmp / "src", tmp / "dist", tmp / "venv"
    shutil.copytree(REPO, src, ignore=IGNORED)
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTHON", "REMANENCE_", "VIRTUAL_ENV"))}
    _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--wheel-dir", str(dist), str(src)], env, tmp)
    wheel, = dist.glob("remanence-*.whl")
    # No pip inside the new environment: the running interpreter's pip installs into it.
    _run([sys.executable, "-m", "venv", "--without-pip", str(venv)], env, tmp)
    python = venv / "bin" / "python"
    site = Path(_run([str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                     env, tmp).strip())
    shared = {sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]}
    (site / "zz_shared_dependencies.pth").write_text("".join(f"{p}\n" for p in sorted(shared)))
    _run([sys.executable, "-m", "pip", "--python", str(python), "install", "--no-deps", "--no-index",
          str(wheel)], env, tmp)
    return venv, env, tmp


def test_server_is_imported_from_the_new_virtualenv(installed):
    venv, env, tmp = installed
    where = _run([str(venv / "bin" / "python"), "-c", "import server; print(server.__file__)"], env, tmp)
    path = Path(where.strip()).resolve()
    assert path.is_relative_to(venv.resolve()), path
    assert not path.is_relative_to(REPO), path
    # Every folder server.package_files resolves travels inside the package (setup.py maps them).
    for name in BUNDLED_FOLDERS:
        assert (path.parent / name).is_dir(), f"the wheel lacks server/{name}"
    # ... with every file of the checkout's folder, byte for byte (a vendored folder whose name is
    # not a package name, such as swagger-ui-dist-<version>, is the case that slips most easily).
    for name in BUNDLED_FOLDERS:
        source = REPO / name
        wanted = {p.relative_to(source) for p in source.rglob("*")
                  if p.is_file() and "__pycache__" not in p.parts}
        shipped = {p.relative_to(path.parent / name) for p in (path.parent / name).rglob("*")
                   if p.is_file() and "__pycache__" not in p.parts}
        assert wanted - shipped == set(), f"server/{name} in the wheel lacks {sorted(map(str, wanted - shipped))}"
        for rel in wanted:
            assert (path.parent / name / rel).read_bytes() == (source / rel).read_bytes(), rel


def test_the_installed_app_initialises_serves_pages_and_static_files(installed):
    venv, env, tmp = installed
    data = tmp / "var"
    env = {**env, "REMANENCE_DATA_DIR": str(data), "REMANENCE_DATABASE_URL": f"sqlite:///{data}/remanence.db",
           "REMANENCE_EMBEDDED_WORKER": "false"}
    data.mkdir()
    _run([str(venv / "bin" / "remanence"), "init"], env, tmp)
    port = _free_port()
    log = (tmp / "serve.log").open("w")
    proc = subprocess.Popen([str(venv / "bin" / "remanence"), "serve", "--host", "127.0.0.1", "--port", str(port)],
                            env=env, cwd=tmp, stdout=log, stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            assert proc.poll() is None, (tmp / "serve.log").read_text()
            try:
                login = httpx.get(f"{base}/login", timeout=5)
                break
            except httpx.TransportError:
                assert time.monotonic() < deadline, "server did not answer within 60 s"
                time.sleep(0.3)
        assert login.status_code == 200 and login.headers["content-type"].startswith("text/html")
        assert "<form" in login.text
        css = httpx.get(f"{base}/static/css/remanence.css", timeout=5)
        assert css.status_code == 200 and css.headers["content-type"].startswith("text/css")
        assert css.content == (REPO / "static" / "css" / "remanence.css").read_bytes()
        htmx, = (REPO / "static" / "vendor").glob("htmx-*.min.js")
        js = httpx.get(f"{base}/static/vendor/{htmx.name}", timeout=5)
        assert js.status_code == 200 and "javascript" in js.headers["content-type"]
        docs = httpx.get(f"{base}/docs", timeout=5)
        assert docs.status_code == 200 and "<title>Remanence API</title>" in docs.text
        bundle = httpx.get(f"{base}{SWAGGER_UI_DIR}/swagger-ui-bundle.js", timeout=10)
        assert bundle.status_code == 200 and "javascript" in bundle.headers["content-type"]
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        log.close()
