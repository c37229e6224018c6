"""Start and stop the processes a benchmark measures: Tonicity, the baseline, a FHIR stub.

Every server binds to a free loopback port, in its own process group (so that a worker
pool is stopped, or killed with SIGKILL, as a whole), with its output in a log file that is
shown when it fails to start.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path
from types import TracebackType
from typing import Any

import httpx

ROOT = Path(__file__).resolve().parent.parent
CLK_TCK = os.sysconf("SC_CLK_TCK")


_HANDED_OUT: set[int] = set()


def free_port() -> int:
    """A loopback port nobody listens on, never the same one twice in this process (the
    kernel may hand a just-closed port out again, and two servers would then race for it)."""
    while True:
        with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
            s.bind(("127.0.0.1", 0))
            port = int(s.getsockname()[1])
        if port not in _HANDED_OUT:
            _HANDED_OUT.add(port)
            return port


def write_config(
    folder: Path,
    *,
    storage_url: str,
    port: int,
    auth_required: bool = False,
    public_base_url: str | None = None,
    extra: str = "",
) -> Path:
    """A TOML config for one Tonicity process (DESIGN.md keys)."""
    base = public_base_url or f"http://127.0.0.1:{port}"
    text = (
        "[server]\n"
        f'public_base_url = "{base}"\n'
        'host = "127.0.0.1"\n'
        f"port = {port}\n\n"
        "[storage]\n"
        f'url = "{storage_url}"\n\n'
        "[auth]\n"
        f"required = {'true' if auth_required else 'false'}\n\n"
        "[logging]\n"
        'level = "WARNING"\n'
        'patient_id_salt = "larkspur-bench-salt"\n\n'
        f"{extra}"
    )
    path = folder / f"tonicity-{port}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def in_process_app(folder: Path, name: str) -> Any:
    """The whole app for in-process runs over ASGI: auth off, a SQLite file ``<name>.db`` in
    ``folder``, warnings-only logs (run its lifespan before calling it)."""
    from cds_service.app import create_app
    from cds_service.config import load_settings

    settings = load_settings(
        None,
        storage={"url": f"sqlite:///{folder / f'{name}.db'}"},
        auth={"required": False},
        logging={"level": "WARNING", "patient_id_salt": f"{name}-salt"},
    )
    return create_app(settings)


def uvicorn_argv(app: str, port: int, *, workers: int = 1, factory: bool = False) -> list[str]:
    argv = [sys.executable, "-m", "uvicorn", app, "--host", "127.0.0.1", "--port", str(port)]
    argv += ["--workers", str(workers), "--no-access-log", "--log-level", "warning"]
    if factory:
        argv.append("--factory")
    return argv


def tonicity_argv(config: Path, port: int) -> list[str]:
    return [
        sys.executable,
        "-m",
        "cds_service.cli",
        "serve",
        "--config",
        str(config),
        "--host",
        "127.0.0.1",
        "--port",
        str(port),
    ]


class Server:
    """A server subprocess; ``with Server(...) as s:`` waits until ``probe`` answers."""

    def __init__(
        self,
        name: str,
        argv: list[str],
        port: int,
        log_dir: Path,
        *,
        env: dict[str, str] | None = None,
        probe: str = "/healthz",
        start_timeout: float = 60.0,
        cwd: Path | None = None,
    ) -> None:
        self.name = name
        self.argv = argv
        self.port = port
        self.base_url = f"http://127.0.0.1:{port}"
        self.log_path = log_dir / f"{name}-{port}.log"
        self.cwd = cwd or ROOT  # another checkout's code: its folder (python -m reads it first)
        self.env = {**os.environ, **(env or {}), "PYTHONPATH": str(self.cwd)}
        self.probe = probe
        self.start_timeout = start_timeout
        self.proc: subprocess.Popen[bytes] | None = None

    def start(self) -> Server:
        log = self.log_path.open("ab")
        self.proc = subprocess.Popen(
            self.argv,
            cwd=self.cwd,
            env=self.env,
            stdout=log,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        log.close()
        deadline = time.monotonic() + self.start_timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"{self.name} exited at start:\n{self.log_tail()}")
            try:
                r = httpx.get(self.base_url + self.probe, timeout=2.0)
                if r.status_code < 500:
                    time.sleep(0.3)  # a second process that lost the port race exits now
                    if self.proc.poll() is not None:
                        raise RuntimeError(f"{self.name} exited at start:\n{self.log_tail()}")
                    return self
            except httpx.HTTPError:
                pass
            time.sleep(0.2)
        self.stop()
        raise RuntimeError(f"{self.name} did not answer {self.probe} in time:\n{self.log_tail()}")

    def log_tail(self, lines: int = 30) -> str:
        try:
            text = self.log_path.read_text(encoding="utf-8", errors="replace")
        except OSError:
            return ""
        return "\n".join(text.splitlines()[-lines:])

    def pids(self) -> list[int]:
        """The server's process and every descendant (uvicorn workers)."""
        if self.proc is None:
            return []
        out, todo = [], [self.proc.pid]
        while todo:
            pid = todo.pop()
            out.append(pid)
            for task in Path(f"/proc/{pid}/task").glob("*"):
                try:
                    todo += [int(c) for c in (task / "children").read_text().split()]
                except OSError:
                    pass
        return out

    def cpu_seconds(self) -> float:
        """User + system CPU of the process tree so far."""
        total = 0.0
        for pid in self.pids():
            try:
                fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            total += (int(fields[11]) + int(fields[12])) / CLK_TCK
        return total

    def rss_per_process(self) -> list[int]:
        """Resident memory (VmRSS, bytes) of each process of the tree, largest first. With
        several uvicorn workers the workers come first, then the supervisor and
        multiprocessing's helper (about 26 and 13 MiB on 2026-12-04)."""
        return sorted((vm_rss(pid) for pid in self.pids()), reverse=True)

    def kill(self) -> None:
        """SIGKILL the whole process group: no shutdown handler runs."""
        if self.proc is not None and self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(10)

    def stop(self) -> None:
        if self.proc is None or self.proc.poll() is not None:
            return
        os.killpg(self.proc.pid, signal.SIGTERM)
        try:
            self.proc.wait(15)
        except subprocess.TimeoutExpired:
            self.kill()

    def __enter__(self) -> Server:
        return self.start()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.stop()


def vm_rss(pid: int | str = "self") -> int:
    """Resident set size of one process in bytes (0 when it is gone)."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


def machine() -> dict[str, object]:
    """What the figures ran on."""
    model = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem_kb = 0
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                mem_kb = int(line.split()[1])
    except OSError:
        pass
    return {
        "nproc": os.cpu_count(),
        "cpu_model": model,
        "memory_gib": round(mem_kb / 1024 / 1024, 1),
        "loadavg_at_start": os.getloadavg(),
        "python": sys.version.split()[0],
        "date_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
