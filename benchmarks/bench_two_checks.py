"""Two checks submitted together through `manage.py serve` (what `make run` starts), against one at a time.

    .venv/bin/python benchmarks/make_reference_parts.py --only zoned_lens_60mm pillar_plate_30mm   # once
    .venv/bin/python benchmarks/bench_two_checks.py [--json out.json]

In a folder of its own (SQLite, folder broker), migrates, seeds the catalogue and the demo users, then
for each shape starts `manage.py serve` with PHASEWRIGHT_SERVE_CHECKS_AT_ONCE set, waits for its worker,
queues the checks (designer, `bay1-lcd-resin`, `standard-resin`, 140 GHz) and waits for them to end:

1. each part alone (2 checks at once allowed): its time from queued to done;
2. both parts queued together, 1 check at once (before this change's default);
3. both parts queued together, 2 checks at once (the default on 2 cores).

A check's time is its row's ``finished_at - created_at``; "both done" is the later finish less the
earlier creation. Memory is measured per check by bench_check.py.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.reliability.servers import free_port, wait_until  # noqa: E402

PARTS = ROOT / "benchmarks" / "parts"
BIG, SMALL = "zoned_lens_60mm.stl", "pillar_plate_30mm.stl"


def _environment(folder: Path) -> dict:
    return {**os.environ, "PHASEWRIGHT_VAR_DIR": str(folder), "REDIS_URL": "",
            "DATABASE_URL": f"sqlite:///{folder / 'phasewright.sqlite3'}", "DJANGO_SETTINGS_MODULE": "webapp.settings"}


@contextlib.contextmanager
def serve(env: dict, at_once: int, log: Path):
    """Run `manage.py serve` with ``at_once`` checks at once until the block ends; yield its process."""
    with open(log, "w") as out:
        proc = subprocess.Popen([sys.executable, "manage.py", "serve", "--port", str(free_port())], cwd=ROOT,
                                env={**env, "PHASEWRIGHT_SERVE_CHECKS_AT_ONCE": str(at_once)}, stdout=out,
                                stderr=subprocess.STDOUT, start_new_session=True)
    try:
        wait_until(lambda: "ready." in log.read_text(), timeout_s=120, what="the worker being ready")
        yield proc
    finally:
        os.kill(proc.pid, signal.SIGTERM)  # serve stops its worker on the way out
        try:
            proc.wait(timeout=60)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()


def _run(names: list[str], at_once: int, env: dict, folder: Path) -> dict:
    """Queue the parts together under a fresh serve; return each check's seconds and both-done seconds."""
    from django.db import close_old_connections

    from webapp.checks.models import Check

    with serve(env, at_once, folder / f"serve-{at_once}-{len(names)}.log"):
        checks = [_submit(name) for name in names]
        ids = [c.pk for c in checks]
        wait_until(lambda: (close_old_connections() or
                            not Check.objects.filter(pk__in=ids, status__in=Check.ACTIVE).exists()),
                   timeout_s=1200, every_s=0.5, what="the checks ending")
    rows = list(Check.objects.filter(pk__in=ids))
    assert all(r.status == "done" for r in rows), [(r.pk, r.status, r.error) for r in rows]
    return {"at_once": at_once, "parts": names, "load": round(os.getloadavg()[0], 1),
            "each_s": {r.design.name: round((r.finished_at - r.created_at).total_seconds(), 1) for r in rows},
            "both_done_s": round((max(r.finished_at for r in rows) - min(r.created_at for r in rows)).total_seconds(), 1),
            "stage_s": {r.design.name: r.report["timings_s"] for r in rows}}


def _submit(name: str):
    from django.contrib.auth.models import User
    from django.db import transaction

    from services.settings import CheckSettings, OpticsSettings
    from webapp.catalogue.models import Material, Printer
    from webapp.checks import services

    with transaction.atomic():
        owner = User.objects.get(username="designer")
        design = services.design_create(owner=owner, name=name, data=(PARTS / name).read_bytes(), units="mm")
        return services.check_create(owner=owner, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                     material=Material.objects.get(slug="standard-resin"),
                                     check_settings=CheckSettings(optics=OpticsSettings(freqs_ghz=(140.0,))))


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--json", default=str(ROOT / "benchmarks" / "results_two_checks.json"))
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="phasewright-two-checks-") as tmp:
        folder = Path(tmp)
        env = _environment(folder)
        for command in (["migrate", "--noinput"], ["seed_demo"]):
            subprocess.run([sys.executable, "manage.py", *command], cwd=ROOT, env=env, check=True, capture_output=True)
        os.environ.update({k: env[k] for k in ("PHASEWRIGHT_VAR_DIR", "REDIS_URL", "DATABASE_URL",
                                               "DJANGO_SETTINGS_MODULE")})
        import django

        django.setup()
        import webapp.celery  # noqa: F401  (the checks' service sends through the project's Celery app)

        results = []
        for names, at_once in (([BIG], 2), ([SMALL], 2), ([BIG, SMALL], 1), ([BIG, SMALL], 2)):
            t0 = time.perf_counter()
            results.append(_run(names, at_once, env, folder))
            print(json.dumps(results[-1]), f"({time.perf_counter() - t0:.0f} s with start-up)", flush=True)
    Path(args.json).write_text(json.dumps(results, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
