"""The real thing: JupyterLab in Debian's chromium (driven by playwright), the setpoint notebook run, a control
moved, and the figure in the page redrawn from the kernel.

The server runs on a free 127.0.0.1 port with its own token, in its own process group, with every Jupyter folder
(config, data, runtime, settings, workspaces) in a temporary directory and a temporary copy of the notebooks, so
autosave never writes into the repository. The browser is the distribution's chromium; playwright's own browser
download is never used. Without chromium or playwright the test fails under CI (CI=true) and is skipped otherwise.
A screenshot of the page goes to tests/artifacts/ (not committed).
"""

from __future__ import annotations

import json
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"
DEBIAN_CHROMIUM = "/usr/bin/chromium"  # Debian's package; used when `chromium` is not on PATH
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-dev-shm-usage",
    "--disable-background-networking",
    "--disable-component-update",
    "--no-first-run",
    "--disable-sync",
]
SERVER_START_S = 60
STEP_MS = 90_000  # the longest single wait in the page (kernel start + the panel's first design)


def _unavailable(reason: str):
    """Under CI a missing browser is a failure, never a skip."""
    if os.environ.get("CI", "").strip().lower() in ("1", "true", "yes"):
        pytest.fail(f"browser test cannot run under CI: {reason}", pytrace=False)
    pytest.skip(reason)


def _chromium() -> str | None:
    found = shutil.which("chromium")
    if found:
        return found
    return DEBIAN_CHROMIUM if Path(DEBIAN_CHROMIUM).is_file() else None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _stop(proc: subprocess.Popen) -> None:
    """SIGTERM to the server's process group (server and kernels), SIGKILL after 15 s."""
    if proc.poll() is not None:
        return
    os.killpg(proc.pid, signal.SIGTERM)
    try:
        proc.wait(timeout=15)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=15)


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """A JupyterLab server on a temporary copy of the notebooks: (base URL, token)."""
    base = tmp_path_factory.mktemp("lab")
    notebooks = base / "notebooks"
    shutil.copytree(
        ROOT / "notebooks", notebooks, ignore=shutil.ignore_patterns(".ipynb_checkpoints", "figure_pack_*")
    )
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    for name in ("JUPYTER_CONFIG_DIR", "JUPYTER_DATA_DIR", "JUPYTER_RUNTIME_DIR", "JUPYTERLAB_SETTINGS_DIR",
                 "JUPYTERLAB_WORKSPACES_DIR"):  # fmt: skip
        folder = base / name.lower()
        folder.mkdir()
        env[name] = str(folder)
    labconfig = Path(env["JUPYTER_CONFIG_DIR"]) / "labconfig"
    labconfig.mkdir()
    (labconfig / "page_config.json").write_text(  # the news popup would cover the figure
        json.dumps({"disabledExtensions": {"@jupyterlab/apputils-extension:announcements": True}})
    )
    port, token = _free_port(), secrets.token_hex(24)
    argv = [
        sys.executable, "-m", "jupyterlab", "--no-browser", "--ip=127.0.0.1", f"--port={port}",
        "--ServerApp.port_retries=0", f"--ServerApp.root_dir={notebooks}", f"--IdentityProvider.token={token}",
        "--LabApp.expose_app_in_browser=True", "--LabApp.extension_manager=readonly",
    ]  # fmt: skip
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        argv.append("--allow-root")
    log = open(base / "server.log", "wb")  # noqa: SIM115 - closed below
    proc = subprocess.Popen(
        argv, cwd=notebooks, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True
    )
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + SERVER_START_S
        while True:
            if proc.poll() is not None:
                pytest.fail(
                    f"JupyterLab exited ({proc.returncode}): {(base / 'server.log').read_text()[-2000:]}"
                )
            try:
                request = urllib.request.Request(
                    f"{url}/api/status", headers={"Authorization": f"token {token}"}
                )
                with urllib.request.urlopen(request, timeout=2) as answer:
                    if answer.status == 200:
                        break
            except (urllib.error.URLError, OSError):
                pass
            if time.monotonic() > deadline:
                pytest.fail(f"JupyterLab did not answer within {SERVER_START_S} s")
            time.sleep(0.3)
        yield url, token
    finally:
        _stop(proc)
        log.close()
    # autosave wrote into the copy only: the repository's notebooks are still without outputs
    for path in (ROOT / "notebooks").glob("*.ipynb"):
        cells = json.loads(path.read_text(encoding="utf-8"))["cells"]
        assert all(not c.get("outputs") for c in cells if c["cell_type"] == "code"), path


KERNEL_IDLE = """() => {
  const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;
  const k = w && w.sessionContext && w.sessionContext.session && w.sessionContext.session.kernel;
  return !!k && k.connectionStatus === 'connected' && k.status === 'idle';
}"""
ALL_RUN = """() => {
  const w = window.jupyterapp.shell.currentWidget;
  const cells = w.content.widgets.filter(c => c.model.type === 'code');
  const k = w.sessionContext.session.kernel;
  return cells.length > 0 && cells.every(c => c.model.executionCount !== null) && k.status === 'idle';
}"""
ERRORS = """() => {
  const w = window.jupyterapp.shell.currentWidget;
  const out = [];
  for (const c of w.content.widgets.filter(c => c.model.type === 'code')) {
    for (const o of c.model.outputs.toJSON()) { if (o.output_type === 'error') out.push(o.ename + ': ' + o.evalue); }
  }
  return out;
}"""
TRACE_Y = """(name) => {
  const gd = document.querySelector('.wb-panel .js-plotly-plot');
  if (!gd || !gd.data) return null;
  const t = gd.data.find(t => t.name === name);
  return t ? Array.from(t.y) : null;
}"""
CHANGED = """([name, before]) => {
  const gd = document.querySelector('.wb-panel .js-plotly-plot');
  const t = gd && gd.data && gd.data.find(t => t.name === name);
  return !!t && JSON.stringify(Array.from(t.y)) !== JSON.stringify(before);
}"""


def test_setpoint_notebook_in_a_real_browser(lab):
    chromium = _chromium()
    if chromium is None:
        _unavailable("Debian chromium not found (apt-get install chromium)")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _unavailable("playwright is not installed (pip install -e '.[test]')")
    url, token = lab
    ARTIFACTS.mkdir(exist_ok=True)
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=chromium, args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1600, "height": 3600})
            page.set_default_timeout(STEP_MS)
            page.goto(f"{url}/lab/tree/setpoint.ipynb?reset&token={token}")
            page.wait_for_function("() => window.jupyterapp !== undefined")
            page.wait_for_function(KERNEL_IDLE)
            page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")
            page.wait_for_function(ALL_RUN)
            assert page.evaluate(ERRORS) == []
            page.wait_for_function(f"() => ({TRACE_Y})('Zn') !== null")
            assert page.locator(".wb-panel").first.inner_text().count("local permit governs") >= 1

            # 1. the margin slider: one step to the right (0.50 -> 0.55) moves every target line
            before_target = page.evaluate(TRACE_Y, "Zn target")
            handle = page.locator(".wb-field-margin .noUi-handle")
            handle.focus()
            start = time.perf_counter()
            handle.press("ArrowRight")
            page.wait_for_function(CHANGED, arg=["Zn target", before_target])
            slider_s = time.perf_counter() - start
            after_target = page.evaluate(TRACE_Y, "Zn target")
            assert after_target[0] == pytest.approx(before_target[0] * 0.55 / 0.5, rel=1e-9)

            # 2. a new zinc concentration typed and entered: the zinc curve itself is recomputed
            page.wait_for_function(KERNEL_IDLE)  # the dose of step 1 follows its figure: let it finish
            before_zn = page.evaluate(TRACE_Y, "Zn")
            box = page.locator(".wb-field-metal-Zn input")
            box.fill("60")
            start = time.perf_counter()
            box.press("Enter")
            page.wait_for_function(CHANGED, arg=["Zn", before_zn])
            typed_s = time.perf_counter() - start
            after_zn = page.evaluate(TRACE_Y, "Zn")
            assert len(after_zn) == len(before_zn) and max(after_zn) > max(before_zn)

            # 3. a bad value: marked beside its box, the figure stays as it was
            box.fill("-3")
            box.press("Enter")
            error = page.locator(".wb-field-error").filter(has_text="allowed 0 to")
            error.first.wait_for()
            assert page.evaluate(TRACE_Y, "Zn") == after_zn
            assert box.input_value() == "-3"

            page.wait_for_function(KERNEL_IDLE)
            page.locator(".wb-panel").first.screenshot(path=str(ARTIFACTS / "setpoint_panel.png"))
            print(f"\nbrowser round trip: slider {slider_s:.2f} s, typed zinc {typed_s:.2f} s")
        finally:
            browser.close()
