"""A real browser and a real JupyterLab (or Notebook 7) for the review's tests and its benchmark.

Chromium is Debian's (``/usr/bin/chromium``), driven by Playwright's Python package; its own
browser download cannot work on these machines. JupyterLab and Notebook 7 run on 127.0.0.1
with a token and throw-away settings, runtime, config, data and workspace folders, the news
pop-up turned off through the settings folder (Notebook 7 reads JupyterLab's). Every wait has a deadline and every process started here is
stopped in a ``finally``.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path
from typing import Iterator

CHROMIUM = os.environ.get("PLANVIEW_CHROMIUM", "/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--no-first-run",
    "--disable-component-update", "--disable-sync", "--disable-quic",
]
LAB_START_TIMEOUT = 90
STOP_TIMEOUT = 15


def chromium_missing() -> str | None:
    """Why the browser tests cannot run here, or None when they can."""
    if not (os.path.isfile(CHROMIUM) and os.access(CHROMIUM, os.X_OK)):
        return f"no Chromium at {CHROMIUM} (apt-get install -y chromium)"
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        return "Playwright's Python package is not installed"
    return None


def require_chromium() -> None:
    """Skip locally, fail in CI (CI=true), when the browser is not there."""
    import pytest

    why = chromium_missing()
    if why is None:
        return
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail(why)
    pytest.skip(why)


@contextlib.contextmanager
def browser_context(viewport=(1400, 1000)) -> Iterator:
    """A Chromium context with a fresh profile folder, closed and removed afterwards."""
    from playwright.sync_api import sync_playwright

    profile = tempfile.mkdtemp(prefix="planview-chromium-")
    try:
        with sync_playwright() as playwright:
            context = playwright.chromium.launch_persistent_context(
                profile, executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True,
                viewport={"width": viewport[0], "height": viewport[1]}, timeout=60_000,
            )
            try:
                context.set_default_timeout(30_000)
                yield context
            finally:
                context.close()
    finally:
        shutil.rmtree(profile, ignore_errors=True)


def offline(context, allowed_prefixes: tuple[str, ...] = ("file://",)) -> list[str]:
    """Abort every request except those to the allowed prefixes; return the list of the
    aborted URLs (filled as the page runs)."""
    blocked: list[str] = []

    def handle(route):
        url = route.request.url
        if url.startswith(allowed_prefixes) or url.startswith(("data:", "blob:")):
            route.continue_()
        else:
            blocked.append(url)
            route.abort()

    context.route("**/*", handle)
    return blocked


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class LabServer:
    """A running JupyterLab: `url(path)` gives an address with the token on it."""

    def __init__(self, root: Path, port: int, token: str, process: subprocess.Popen, log: Path):
        self.root = root
        self.port = port
        self.token = token
        self.process = process
        self.log = log

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def url(self, path: str) -> str:
        return f"{self.base}/{path.lstrip('/')}?token={self.token}"

    def log_tail(self, chars: int = 4000) -> str:
        try:
            return self.log.read_text(errors="replace")[-chars:]
        except OSError:
            return ""


def _write_lab_settings(settings: Path) -> None:
    """News and update checks off (the real keys of JupyterLab 4's notification plugin), and
    no pop-up asking about them."""
    folder = settings / "@jupyterlab" / "apputils-extension"
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "notification.jupyterlab-settings").write_text(json.dumps(
        {"fetchNews": "false", "checkForUpdates": False}))
    shortcuts = settings / "@jupyterlab" / "notebook-extension"
    shortcuts.mkdir(parents=True, exist_ok=True)
    (shortcuts / "tracker.jupyterlab-settings").write_text(json.dumps({"kernelShutdown": False}))


@contextlib.contextmanager
def jupyter_lab(root: Path, timeout: float = LAB_START_TIMEOUT) -> Iterator[LabServer]:
    """JupyterLab serving `root`, stopped (and its folders removed) when the block ends."""
    with _jupyter_server("jupyterlab", root, timeout) as server:
        yield server


@contextlib.contextmanager
def jupyter_notebook(root: Path, timeout: float = LAB_START_TIMEOUT) -> Iterator[LabServer]:
    """Jupyter Notebook 7 serving `root` (notebooks open at ``/notebooks/<path>``), with the
    same throw-away folders and news pop-up off as `jupyter_lab`; stopped when the block ends."""
    with _jupyter_server("notebook", root, timeout) as server:
        yield server


@contextlib.contextmanager
def _jupyter_server(module: str, root: Path, timeout: float) -> Iterator[LabServer]:
    """`python -m <module>` (jupyterlab or notebook: both are Jupyter Server applications that
    read JupyterLab's settings folder) on 127.0.0.1, a free port and a fresh token."""
    state = Path(tempfile.mkdtemp(prefix=f"planview-{module}-"))
    env = dict(os.environ)
    folders = {
        "JUPYTERLAB_SETTINGS_DIR": state / "settings",
        "JUPYTERLAB_WORKSPACES_DIR": state / "workspaces",
        "JUPYTER_RUNTIME_DIR": state / "runtime",
        "JUPYTER_CONFIG_DIR": state / "config",
        "JUPYTER_DATA_DIR": state / "data",
        "IPYTHONDIR": state / "ipython",
    }
    for name, path in folders.items():
        path.mkdir(parents=True, exist_ok=True)
        env[name] = str(path)
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    _write_lab_settings(folders["JUPYTERLAB_SETTINGS_DIR"])
    port = free_port()
    token = secrets.token_hex(16)
    log = state / f"{module}.log"
    command = [
        sys.executable, "-m", module, "--no-browser", "--ServerApp.ip=127.0.0.1",
        f"--ServerApp.port={port}", "--ServerApp.port_retries=0", f"--IdentityProvider.token={token}",
        f"--ServerApp.root_dir={root}", "--ServerApp.open_browser=False",
        "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
        "--ServerApp.disable_check_xsrf=False", "--allow-root",
    ]
    with open(log, "wb") as log_file:
        process = subprocess.Popen(command, cwd=root, env=env, stdout=log_file, stderr=subprocess.STDOUT,
                                   start_new_session=True)
    server = LabServer(root, port, token, process, log)
    try:
        _wait_until_up(server, timeout)
        yield server
    finally:
        _stop(process)
        shutil.rmtree(state, ignore_errors=True)


def _wait_until_up(server: LabServer, timeout: float) -> None:
    deadline = time.monotonic() + timeout
    last = ""
    while time.monotonic() < deadline:
        if server.process.poll() is not None:
            raise RuntimeError(f"{server.process.args[2]} exited with {server.process.returncode}:\n{server.log_tail()}")
        try:
            with urllib.request.urlopen(server.url("api/status"), timeout=5) as response:
                if response.status == 200:
                    return
        except OSError as exc:
            last = str(exc)
        time.sleep(0.3)
    raise TimeoutError(f"{server.process.args[2]} did not answer within {timeout:.0f} s ({last}):\n{server.log_tail()}")


def _stop(process: subprocess.Popen) -> None:
    if process.poll() is not None:
        return
    try:
        os.killpg(process.pid, signal.SIGTERM)
    except ProcessLookupError:
        return
    try:
        process.wait(timeout=STOP_TIMEOUT)
    except subprocess.TimeoutExpired:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(process.pid, signal.SIGKILL)
        process.wait(timeout=STOP_TIMEOUT)


def run_all_cells(page, timeout_ms: int = 90_000) -> None:
    """Run every cell of the open notebook through the menu bar, once its kernel is idle. JupyterLab
    and Notebook 7 share it (Lumino's, Run → Run All Cells) and the toolbar's execution indicator."""
    page.locator(".jp-Notebook").first.wait_for(timeout=timeout_ms)
    wait_kernel_idle(page, timeout_ms)
    page.locator(".lm-MenuBar-item", has_text="Run").first.click()
    page.locator(".lm-Menu-item", has=page.locator(".lm-Menu-itemLabel", has_text=re.compile(r"^Run All Cells$"))) \
        .first.click()


def wait_kernel_idle(page, timeout_ms: int = 90_000) -> None:
    page.wait_for_function(
        """() => {
            const status = document.querySelector('.jp-Notebook-ExecutionIndicator');
            const name = document.querySelector('.jp-KernelName, .jp-Toolbar-kernelName');
            return status && status.getAttribute('data-status') === 'idle' && name
                && !/No Kernel|Connecting/i.test(name.textContent || '');
        }""", timeout=timeout_ms)
