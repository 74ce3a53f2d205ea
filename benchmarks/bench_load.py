"""Load on the production shape: page and status latency at 50 clients, and checks per minute with 2 workers.

    .venv/bin/python benchmarks/bench_load.py [--clients 50] [--seconds 30] [--json out.json]

Starts deploy/single-host.sh (gunicorn, two check workers, PostgreSQL and Redis on 127.0.0.1) in a
folder of its own with its own database, signs in as the demo designer, and then:

1. idle: CLIENTS clients, each a keep-alive connection asking again the moment an answer arrives
   (closed loop, no think time), alternate a finished report page and a status call for SECONDS;
2. saturated: the reference parts (benchmarks/parts/, from make_reference_parts.py) are queued, and the
   same load runs while both workers check them;
3. throughput: the queued reference checks are waited for, and checks per minute are counted from the
   first start to the last finish.

The load generator is asyncio over raw HTTP/1.1 (stdlib only), on the same 2 cores as the site; it
costs some of the CPU it measures. Every request is bounded by the clock and stops by itself; it only
talks to 127.0.0.1.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.reliability.servers import free_port  # noqa: E402
from tests.reliability.webclient import WebClient  # noqa: E402

PASSWORD = "bench-load-password-1"
PARTS = ROOT / "benchmarks" / "parts"
# The reference parts a lab checks most (the 2M-triangle lens and the 60 mm ball are the slow extremes).
REFERENCE = ["zoned_lens_60mm.stl", "pillar_plate_30mm.stl", "pillar_plate_30mm_seg16.stl", "zoned_lens_60mm.stl",
             "pillar_plate_30mm.stl", "pillar_plate_30mm_seg16.stl"]
CHECK_FIELDS = {"units": "mm", "printer": "bay1-lcd-resin", "material": "standard-resin", "quantities": "1, 10",
                "freqs": "140"}


async def _get(reader, writer, host: str, path: str, cookie: str) -> int:
    """Send one keep-alive GET and read the whole answer; return the status."""
    writer.write(f"GET {path} HTTP/1.1\r\nHost: {host}\r\nCookie: {cookie}\r\n\r\n".encode())
    await writer.drain()
    head = await reader.readuntil(b"\r\n\r\n")
    lines = head.decode("latin-1").split("\r\n")
    status = int(lines[0].split()[1])
    headers = {k.lower(): v.strip() for k, _, v in (ln.partition(":") for ln in lines[1:] if ln)}
    await reader.readexactly(int(headers.get("content-length", "0")))
    if headers.get("connection", "").lower() == "close":
        raise ConnectionResetError("server closed the connection")
    return status


async def _client(port: int, paths: list[str], cookie: str, deadline: float, out: dict) -> None:
    """Ask for the paths in turn until the deadline; record each latency under its path's kind."""
    reader = writer = None
    i = 0
    while time.monotonic() < deadline:
        path = paths[i % len(paths)]
        kind = "status" if path.endswith("status.json") else "page"
        i += 1
        t0 = time.perf_counter()
        try:
            if writer is None:
                reader, writer = await asyncio.open_connection("127.0.0.1", port)
            status = await asyncio.wait_for(_get(reader, writer, f"127.0.0.1:{port}", path, cookie), 30)
            ok = status == 200
        except (OSError, asyncio.IncompleteReadError, asyncio.TimeoutError, ConnectionError):
            ok, writer = False, None
        out[kind].append((time.perf_counter() - t0) * 1000.0)
        out[f"{kind}_errors"] += not ok
    if writer is not None:
        writer.close()


def _summary(latencies_ms: list[float], errors: int, seconds: float) -> dict:
    if not latencies_ms:
        return {"requests": 0}
    q = statistics.quantiles(latencies_ms, n=100) if len(latencies_ms) > 1 else latencies_ms * 99
    return {"requests": len(latencies_ms), "per_s": round(len(latencies_ms) / seconds, 1),
            "p50_ms": round(q[49], 1), "p95_ms": round(q[94], 1), "max_ms": round(max(latencies_ms), 1),
            "errors": errors}


def load(port: int, paths: list[str], cookie: str, clients: int, seconds: float) -> dict:
    """Run the closed-loop load and return p50 / p95 / errors per kind of request."""
    out = {"page": [], "status": [], "page_errors": 0, "status_errors": 0}

    async def main() -> None:
        deadline = time.monotonic() + seconds
        # Each client starts on a different path, so pages and status calls are always mixed.
        await asyncio.gather(*(_client(port, paths[i % len(paths):] + paths[:i % len(paths)], cookie, deadline, out)
                               for i in range(clients)))

    asyncio.run(main())
    return {kind: _summary(out[kind], out[f"{kind}_errors"], seconds) for kind in ("page", "status")}


def _submit(client: WebClient, name: str, data: bytes) -> str:
    fields = client.form_defaults("/designs/new/") | CHECK_FIELDS
    status, url, body = client.upload("/designs/new/", fields, "file", name, data)
    assert status == 200 and "/checks/" in url, (status, url)
    return url.rstrip("/").rsplit("/", 1)[1]


def _wait(client: WebClient, ids: list[str], timeout_s: float) -> list[dict]:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        states = [client.json(f"/checks/{i}/status.json") for i in ids]
        if all(s["status"] in ("done", "failed") for s in states):
            return states
        time.sleep(2)
    raise SystemExit(f"checks still running after {timeout_s:.0f} s")


def _throughput(run_dir: Path, db_name: str, ids: list[str]) -> dict:
    """Return checks per minute from the first start to the last finish, read from the database."""
    query = ("SELECT extract(epoch FROM min(started_at)), extract(epoch FROM max(finished_at)), count(*), "
             "sum(CASE WHEN status = 'done' THEN 1 ELSE 0 END) FROM checks_check WHERE public_id::text IN ("
             + ",".join(f"'{i}'" for i in ids) + ")")
    out = subprocess.run(["psql", f"postgres://postgres@127.0.0.1:5432/{db_name}", "-tAc", query],
                         capture_output=True, text=True, check=True).stdout.strip().split("|")
    first, last, count, done = float(out[0]), float(out[1]), int(out[2]), int(out[3])
    return {"checks": count, "done": done, "span_s": round(last - first, 1),
            "per_minute": round(60.0 * count / (last - first), 2)}


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--clients", type=int, default=50)
    parser.add_argument("--seconds", type=float, default=30.0)
    parser.add_argument("--json", type=Path, default=None, help="also write the results here")
    args = parser.parse_args(argv)
    missing = [p for p in set(REFERENCE) if not (PARTS / p).exists()]
    if missing:
        raise SystemExit(f"missing reference parts {missing}: run benchmarks/make_reference_parts.py first")
    port, run_dir = free_port(), Path(tempfile.mkdtemp(prefix="bench-load-"))
    db_name = f"phasewright_bench_{os.getpid()}"
    env = {**{k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "REDIS_URL")}, "PORT": str(port),
           "RUN_DIR": str(run_dir), "DB_NAME": db_name, "REDIS_PORT": str(free_port()),
           "PHASEWRIGHT_DEMO_PASSWORD": PASSWORD, "STOP_WAIT_S": "5"}
    script = str(ROOT / "deploy" / "single-host.sh")
    subprocess.run(["bash", script, "start"], env=env, check=True, capture_output=True)
    try:
        results = _run(port, run_dir, db_name, args)
    finally:
        subprocess.run(["bash", script, "stop"], env=env, capture_output=True)
        subprocess.run(["psql", "postgres://postgres@127.0.0.1:5432/postgres", "-qc", f"DROP DATABASE {db_name}"],
                       capture_output=True)
    print(json.dumps(results, indent=2))
    if args.json:
        args.json.write_text(json.dumps(results, indent=2) + "\n")
    return 0


def _run(port: int, run_dir: Path, db_name: str, args) -> dict:
    from tests.webapp.parts import box_stl

    client = WebClient(f"http://127.0.0.1:{port}")
    client.login("designer", PASSWORD)
    cookie = "; ".join(f"{c.name}={c.value}" for c in client.jar)
    warm = [_submit(client, f"box-{i}.stl", box_stl(10 + i, 8, 3)) for i in range(3)]
    _wait(client, warm, 300)
    paths = [p for i in warm for p in (f"/checks/{i}/", f"/checks/{i}/status.json")]
    # The machine's load average before each phase: other work on the same cores shows up in the numbers.
    results = {"clients": args.clients, "seconds": args.seconds, "cores": os.cpu_count(),
               "loadavg_before_idle": os.getloadavg()[0],
               "idle": load(port, paths, cookie, args.clients, args.seconds)}
    reference = [_submit(client, name, (PARTS / name).read_bytes()) for name in REFERENCE]
    time.sleep(3)  # both workers have started a check
    results["loadavg_before_saturated"] = os.getloadavg()[0]
    results["saturated"] = load(port, paths, cookie, args.clients, args.seconds)
    states = _wait(client, reference, 1800)
    results["reference_checks"] = REFERENCE
    results["failed"] = [s["error"] for s in states if s["status"] != "done"]
    results["throughput"] = _throughput(run_dir, db_name, reference)
    return results


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
