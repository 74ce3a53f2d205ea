"""Servers the reliability tests start and break on loopback: a private Redis, a pausable TCP proxy."""

from __future__ import annotations

import contextlib
import shutil
import socket
import subprocess
import threading
import time
from pathlib import Path


def free_port() -> int:
    """Return a loopback port nothing listens on (the kernel's pick)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def answers(port: int, host: str = "127.0.0.1") -> bool:
    try:
        socket.create_connection((host, port), timeout=1).close()
        return True
    except OSError:
        return False


def wait_until(predicate, *, timeout_s: float, what: str, every_s: float = 0.1):
    """Poll ``predicate`` until it returns something truthy; return that, or fail naming ``what``."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(every_s)
    raise AssertionError(f"{what} did not happen within {timeout_s:.0f} s")


class RedisServer:
    """A redis-server of our own on a free loopback port, with an append-only file so it can restart.

    Never the machine's shared Redis on 6379: these tests stop and start their broker.
    """

    def __init__(self, workdir: Path) -> None:
        self.port = free_port()
        self.dir = workdir
        self.proc: subprocess.Popen | None = None

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self) -> None:
        # appendfsync always: a message the producer was told is stored survives the restart below.
        self.proc = subprocess.Popen(
            [shutil.which("redis-server"), "--port", str(self.port), "--bind", "127.0.0.1", "--dir", str(self.dir),
             "--appendonly", "yes", "--appendfsync", "always", "--save", "", "--protected-mode", "yes"],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        wait_until(lambda: answers(self.port), timeout_s=20, what=f"redis-server on port {self.port}")

    def stop(self) -> None:
        """Shut down cleanly (SIGTERM: Redis flushes its append-only file and exits)."""
        if self.proc and self.proc.poll() is None:
            self.proc.terminate()
            self.proc.wait(timeout=20)
        self.proc = None

    def restart(self) -> None:
        self.stop()
        self.start()


@contextlib.contextmanager
def redis_server(workdir: Path):
    if not shutil.which("redis-server"):
        import pytest

        pytest.skip("redis-server is not installed")
    server = RedisServer(workdir)
    server.start()
    try:
        yield server
    finally:
        server.stop()


class TcpProxy:
    """Forward a loopback port to a target; pause() refuses new connections and cuts the open ones."""

    def __init__(self, target: tuple[str, int]) -> None:
        self.target = target
        self.port = free_port()
        self._listener: socket.socket | None = None
        self._conns: set[socket.socket] = set()
        self._lock = threading.Lock()

    def start(self) -> None:
        listener = socket.socket()
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        listener.bind(("127.0.0.1", self.port))
        listener.listen(64)
        self._listener = listener
        threading.Thread(target=self._accept, args=(listener,), daemon=True).start()

    def pause(self) -> int:
        """Close the listening socket (a connect is refused) and every forwarded connection; return how many."""
        listener, self._listener = self._listener, None
        if listener:
            with contextlib.suppress(OSError):
                listener.shutdown(socket.SHUT_RDWR)
            listener.close()
        with self._lock:
            conns, self._conns = self._conns, set()
        for conn in conns:
            with contextlib.suppress(OSError):
                conn.shutdown(socket.SHUT_RDWR)
            conn.close()
        return len(conns) // 2

    def resume(self) -> None:
        self.start()

    stop = pause

    def _accept(self, listener: socket.socket) -> None:
        while True:
            try:
                client, _ = listener.accept()
            except OSError:
                return  # paused
            try:
                upstream = socket.create_connection(self.target, timeout=5)
                upstream.settimeout(None)
            except OSError:
                client.close()
                continue
            with self._lock:
                self._conns |= {client, upstream}
            for a, b in ((client, upstream), (upstream, client)):
                threading.Thread(target=self._pump, args=(a, b), daemon=True).start()

    def _pump(self, src: socket.socket, dst: socket.socket) -> None:
        try:
            while data := src.recv(65536):
                dst.sendall(data)
        except OSError:
            pass
        finally:
            for s in (src, dst):
                with contextlib.suppress(OSError):
                    s.shutdown(socket.SHUT_RDWR)
            with self._lock:
                self._conns -= {src, dst}
