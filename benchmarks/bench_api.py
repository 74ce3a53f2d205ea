"""Benchmark the API: a folder of small parts through ``phasewright batch`` with two worker processes.

Measures checks per minute (first upload to last finished check) and the latency of status calls
(``GET /api/v1/checks/{id}``) made by a separate probe five times a second while the batch runs,
reported over all samples and over those taken while both workers were busy.

    .venv/bin/python benchmarks/bench_api.py [--parts 100] [--jobs 8] [--stack local|pg-redis]

It starts its own site (gunicorn with deploy/gunicorn.conf.py, DEBUG off) and one Celery worker with
two processes, in a fresh folder under /tmp, and writes benchmarks/results_api.json. ``local`` is
SQLite and the folder broker (the zero-setup default); ``pg-redis`` is PostgreSQL and Redis on
127.0.0.1 (a throwaway database, Redis database 13), as production runs.
"""

from __future__ import annotations

import argparse
import json
import os
import secrets
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import urllib.request
from datetime import datetime
from pathlib import Path

import trimesh

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from services.cli.batch import BatchOptions, Client, run_batch  # noqa: E402

PY = str(ROOT / ".venv" / "bin" / "python")
PG_DB = "phasewright_bench_api"
PROBE_INTERVAL_S = 0.2


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def environment(run: Path, port: int, stack: str) -> dict:
    """Return the environment of the site and workers: DEBUG off, plain http on loopback."""
    inherited = {k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "REDIS_URL")}
    env = {**inherited, "PHASEWRIGHT_VAR_DIR": str(run / "var"), "PHASEWRIGHT_DEBUG": "False",
           "PHASEWRIGHT_HTTPS": "False", "PHASEWRIGHT_BEHIND_PROXY": "False",
           "PHASEWRIGHT_SECRET_KEY": secrets.token_urlsafe(64), "PHASEWRIGHT_SITE_ROOT": f"http://127.0.0.1:{port}",
           "PHASEWRIGHT_ALLOWED_HOSTS": "127.0.0.1,localhost", "PHASEWRIGHT_BIND": f"127.0.0.1:{port}",
           "PHASEWRIGHT_ACCESS_LOG": str(run / "access.log"), "PHASEWRIGHT_LOG_LEVEL": "WARNING",
           "PHASEWRIGHT_MAX_ACTIVE_CHECKS": "1000"}
    if stack == "pg-redis":
        env.update(DATABASE_URL=f"postgres://postgres@127.0.0.1:5432/{PG_DB}", DB_CONN_MAX_AGE="60",
                   REDIS_URL="redis://127.0.0.1:6379/13")
    return env


def postgres(sql: str) -> None:
    import psycopg

    with psycopg.connect("postgres://postgres@127.0.0.1:5432/postgres", autocommit=True) as conn:
        conn.execute(sql)


def prepare_site(env: dict) -> str:
    """Migrate, seed the catalogue and the demo users, and return an API token for the designer."""
    manage = [PY, str(ROOT / "manage.py")]
    subprocess.run([*manage, "migrate", "--noinput", "-v", "0"], env=env, check=True, cwd=ROOT)
    subprocess.run([*manage, "seed_demo"], env=env, check=True, cwd=ROOT, stdout=subprocess.DEVNULL)
    made = subprocess.run([*manage, "create_api_token", "designer", "--name", "benchmark"], env=env, check=True,
                          cwd=ROOT, capture_output=True, text=True)
    return made.stdout.strip()


def start(name: str, cmd: list[str], env: dict, run: Path) -> subprocess.Popen:
    log = open(run / f"{name}.log", "ab")  # noqa: SIM115 (closed with the process)
    return subprocess.Popen(cmd, env=env, cwd=ROOT, stdout=log, stderr=log, start_new_session=True)


def stop(proc: subprocess.Popen) -> None:
    """Ask the process group for a warm shutdown, then make sure it is gone."""
    try:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=30)
    except (ProcessLookupError, subprocess.TimeoutExpired):
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()


def wait_until_up(url: str, timeout_s: float = 60) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            urllib.request.urlopen(url, timeout=2).read()
            return
        except OSError:
            time.sleep(0.3)
    raise SystemExit(f"the site did not come up at {url}")


def make_parts(folder: Path, count: int) -> None:
    """Write ``count`` small distinct parts: plates and lens blanks of a few millimetres."""
    folder.mkdir(parents=True)
    for i in range(count):
        if i % 2:
            mesh = trimesh.creation.cylinder(radius=4.0 + 0.05 * i, height=2.0 + 0.01 * i, sections=64)
        else:
            mesh = trimesh.creation.box(extents=(8.0 + 0.05 * i, 6.0 + 0.03 * i, 2.0 + 0.01 * i))
        mesh.apply_translation((0, 0, -mesh.bounds[0][2]))
        mesh.export(folder / f"part-{i:03d}.stl")


class Probe(threading.Thread):
    """Ask for the newest check's status every PROBE_INTERVAL_S; record (wall time, latency in s)."""

    def __init__(self, client: Client) -> None:
        super().__init__(daemon=True)
        self.client, self.samples, self.done = client, [], threading.Event()

    def run(self) -> None:
        target, chosen_at = None, 0.0
        while not self.done.is_set():
            if target is None or time.monotonic() - chosen_at > 5:
                items = self.client.call("GET", "checks?limit=1")["items"]
                target, chosen_at = (items[0]["id"] if items else None), time.monotonic()
            if target is not None:
                wall, t0 = time.time(), time.perf_counter()
                self.client.call("GET", f"checks/{target}")
                self.samples.append((wall, time.perf_counter() - t0))
            self.done.wait(PROBE_INTERVAL_S)


def all_checks(client: Client) -> list[dict]:
    checks, offset = [], 0
    while True:
        page = client.call("GET", f"checks?limit=200&offset={offset}")
        checks += page["items"]
        offset += 200
        if offset >= page["count"]:
            return checks


def _ts(text: str | None) -> float | None:
    return datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp() if text else None


def running_at(wall: float, spans: list[tuple[float, float]]) -> int:
    return sum(start <= wall < end for start, end in spans)


def latency_stats(latencies_s: list[float]) -> dict:
    if len(latencies_s) < 2:
        return {"n": len(latencies_s)}
    q = statistics.quantiles(latencies_s, n=100, method="inclusive")
    return {"n": len(latencies_s), "p50_ms": round(1000 * q[49], 1), "p95_ms": round(1000 * q[94], 1),
            "p99_ms": round(1000 * q[98], 1), "max_ms": round(1000 * max(latencies_s), 1)}


def measure(run: Path, server: str, token: str, args) -> dict:
    """Run the batch with the probe beside it; return the numbers."""
    opts = BatchOptions(server=server, token=token, printer="bay1-lcd-resin", material="standard-resin", units="mm",
                        freqs_ghz=(140.0,), jobs=args.jobs, poll_s=1.0)
    probe = Probe(Client(server, token))
    probe.start()
    t0 = time.time()
    with open(run / "batch.log", "w") as log:
        rows, code = run_batch(run / "parts", opts, out=run / "summary.csv", stream=log, tty=False)
    wall_s = time.time() - t0
    probe.done.set()
    probe.join()
    checks = all_checks(Client(server, token))
    spans = [(_ts(c["started_at"]), _ts(c["finished_at"])) for c in checks if c["started_at"] and c["finished_at"]]
    busy = [lat for wall, lat in probe.samples if running_at(wall, spans) >= 2]
    first, last = min(_ts(c["created_at"]) for c in checks), max(end for _, end in spans)
    return {"parts": args.parts, "jobs": args.jobs, "stack": args.stack, "exit_code": code, "wall_s": round(wall_s, 1),
            "done": sum(c["status"] == "done" for c in checks), "failed": sum(c["status"] == "failed" for c in checks),
            "checks_per_min": round(60 * len(spans) / (last - first), 1),
            "mean_check_s": round(statistics.mean(end - start for start, end in spans), 2),
            "status_latency_all": latency_stats([lat for _, lat in probe.samples]),
            "status_latency_workers_busy": latency_stats(busy), "cpus": os.cpu_count(),
            "load_avg_1m_at_start": round(args.load_at_start, 2),
            "errors": [r.error for r in rows if r.error][:5]}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=100)
    parser.add_argument("--jobs", type=int, default=8)
    parser.add_argument("--stack", choices=("local", "pg-redis"), default="local")
    args = parser.parse_args()
    args.load_at_start = os.getloadavg()[0]  # other work on the machine skews the numbers: record it
    run, port = Path(tempfile.mkdtemp(prefix="pw-bench-api-")), free_port()
    env, server = environment(run, port, args.stack), f"http://127.0.0.1:{port}"
    if args.stack == "pg-redis":
        postgres(f"DROP DATABASE IF EXISTS {PG_DB}")
        postgres(f"CREATE DATABASE {PG_DB}")
    token = prepare_site(env)
    make_parts(run / "parts", args.parts)
    gunicorn = [str(ROOT / ".venv/bin/gunicorn"), "-c", "deploy/gunicorn.conf.py", "webapp.wsgi"]
    worker = [PY, "-m", "celery", "-A", "webapp", "worker", "--loglevel", "WARNING", "--concurrency", "2",
              "--without-gossip", "--without-mingle", "--hostname", f"bench-api-{port}@%h"]
    procs = [start("web", gunicorn, env, run), start("worker", worker, env, run)]
    try:
        wait_until_up(server + "/api/v1/")
        results = measure(run, server, token, args)
    finally:
        for proc in procs:
            stop(proc)
        if args.stack == "pg-redis":
            postgres(f"DROP DATABASE IF EXISTS {PG_DB} WITH (FORCE)")
    results["run_dir"] = str(run)
    out = ROOT / "benchmarks" / "results_api.json"
    saved = json.loads(out.read_text()) if out.exists() else {}
    saved[args.stack] = results
    out.write_text(json.dumps(saved, indent=2) + "\n")
    print(json.dumps(results, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
