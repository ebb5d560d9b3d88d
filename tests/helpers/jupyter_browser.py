"""Run a notebook in a real JupyterLab, in headless Chromium driven by Playwright.

Used by the browser tests. JupyterLab runs on 127.0.0.1 with a random token and
its own throw-away configuration, data, runtime and settings folders, with its
news, update and extension-manager look-ups off; Chromium runs with background
networking, component updates and sync disabled, so nothing reaches for the
network.
"""

from __future__ import annotations

import contextlib
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path

CHROMIUM = os.environ.get("BROWSER_PATH") or shutil.which("chromium") or "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--disable-dev-shm-usage",
    "--disable-quic",
]


def chromium_available() -> bool:
    """True when the browser the tests will launch (:data:`CHROMIUM`) exists."""
    return Path(CHROMIUM).is_file()


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextlib.contextmanager
def jupyterlab_server(root_dir: Path, scratch: Path) -> Iterator[tuple[str, str]]:
    """Start JupyterLab serving `root_dir`; yield (base_url, token); stop it afterwards."""
    port = _free_port()
    token = secrets.token_hex(16)
    env = dict(os.environ)
    for name in ("HOME", "JUPYTER_CONFIG_DIR", "JUPYTER_DATA_DIR", "JUPYTER_RUNTIME_DIR", "IPYTHONDIR",
                 "JUPYTERLAB_SETTINGS_DIR", "JUPYTERLAB_WORKSPACES_DIR"):
        path = scratch / name.lower()
        path.mkdir(parents=True, exist_ok=True)
        env[name] = str(path)
    # no "fetch the Jupyter news?" question and no update check (the command-line switches do not silence the
    # question in JupyterLab 4)
    settings = scratch / "jupyterlab_settings_dir" / "@jupyterlab" / "apputils-extension"
    settings.mkdir(parents=True, exist_ok=True)
    (settings / "notification.jupyterlab-settings").write_text(
        '{"fetchNews": "false", "checkForUpdates": false}', encoding="utf-8")
    # the kernel must find the same Python (and ndtmap) as the test run
    env["JUPYTER_PATH"] = str(Path(sys.prefix) / "share" / "jupyter")
    env["PYTHONPATH"] = os.pathsep.join([str(Path(__file__).resolve().parents[1]), env.get("PYTHONPATH", "")])
    cmd = [
        sys.executable, "-m", "jupyterlab",
        "--no-browser", "--allow-root",
        "--ServerApp.ip=127.0.0.1", f"--ServerApp.port={port}", "--ServerApp.port_retries=0",
        f"--IdentityProvider.token={token}", f"--ServerApp.root_dir={root_dir}",
        "--LabApp.news_url=None",
        "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
        "--LabApp.extension_manager=readonly",
        "--LabApp.expose_app_in_browser=True",
    ]
    log = open(scratch / "jupyterlab.log", "wb")  # noqa: SIM115 - closed below
    proc = subprocess.Popen(cmd, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"JupyterLab exited early; see {scratch / 'jupyterlab.log'}")
            try:
                with urllib.request.urlopen(f"{base}/api/status?token={token}", timeout=2) as r:
                    if r.status == 200:
                        break
            except OSError:
                pass
            if time.monotonic() > deadline:
                raise RuntimeError("JupyterLab did not start within 60 s")
            time.sleep(0.3)
        yield base, token
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            with contextlib.suppress(ProcessLookupError):
                os.killpg(proc.pid, signal.SIGKILL)
        log.close()


def delete_sessions(base: str, token: str) -> None:
    """Shut down every kernel session the test opened."""
    import json

    with urllib.request.urlopen(f"{base}/api/sessions?token={token}", timeout=5) as r:
        sessions = json.loads(r.read())
    for s in sessions:
        req = urllib.request.Request(f"{base}/api/sessions/{s['id']}?token={token}", method="DELETE")
        with contextlib.suppress(OSError):
            urllib.request.urlopen(req, timeout=5).close()


WAIT_FOR_KERNEL_JS = """
async () => {
  const app = window.jupyterapp;
  const panel = app.shell.currentWidget;
  await panel.context.ready;
  await panel.sessionContext.ready;
  const kernel = panel.sessionContext.session.kernel;
  await kernel.info;
  return kernel.name;
}
"""


def open_and_run_notebook(page, base: str, token: str, notebook: str, *, timeout_s: float = 240) -> None:
    """Open `notebook` (path relative to the server root) and run all its cells; wait until done."""
    page.set_default_timeout(timeout_s * 1000)
    page.goto(f"{base}/lab/tree/{notebook}?token={token}&reset")
    page.wait_for_selector(".jp-NotebookPanel .jp-Cell")
    page.wait_for_function("() => window.jupyterapp && window.jupyterapp.shell.currentWidget "
                           "&& window.jupyterapp.shell.currentWidget.sessionContext")
    page.evaluate(WAIT_FOR_KERNEL_JS)
    page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")
    # every code cell shows an execution count when it has run
    page.wait_for_function(
        """() => {
          const prompts = [...document.querySelectorAll('.jp-CodeCell .jp-InputPrompt')];
          return prompts.length > 0 && prompts.every(p => /\\[\\d+\\]/.test(p.textContent));
        }""",
        timeout=timeout_s * 1000,
    )
