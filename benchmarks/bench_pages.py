"""Time the designer's pages for a finished report, server side, in this process (the target: under 300 ms).

    .venv/bin/python benchmarks/bench_pages.py [--repeat 30]

Builds a throwaway site in a temporary folder (SQLite, the starter catalogue, one user), checks the
60 mm zoned lens at 7 frequencies 125-155 GHz with its focus on the LCD resin printer (the worker's
work, done once, not timed as a page), then requests each page through Django's test client and
prints one JSON line: median and worst time per page, and the SQL queries each takes.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def _setup_django(var_dir: str) -> None:
    os.environ["PHASEWRIGHT_VAR_DIR"] = var_dir
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "webapp.settings")
    import django
    from django.core.management import call_command

    django.setup()
    call_command("migrate", verbosity=0)


def _finished_checks():
    """Return (user, check of the lens, check of the lens in another material), stored as the worker stores them."""
    from unittest import mock

    from django.contrib.auth.models import User

    from services.components import build_component, export_mesh
    from services.intake import read_part
    from services.report import build_report
    from services.settings import CheckSettings, OpticsSettings
    from webapp.catalogue.models import Material, Printer
    from webapp.catalogue.services import catalogue_seed
    from webapp.checks import services

    catalogue_seed()
    user = User.objects.create_user("bench", password="bench-password-1")
    printer = Printer.objects.get(slug="bay1-lcd-resin")
    settings = CheckSettings(optics=OpticsSettings(freqs_ghz=tuple(125.0 + 5 * i for i in range(7)), focal_length_mm=72.0))
    checks = []
    for slug in ("standard-resin", "tough-resin"):
        material = Material.objects.get(slug=slug)
        lens = build_component("zoned", {"diameter_mm": 60, "focal_length_mm": 72, "freq_ghz": 140},
                               material=material.snapshot(), printer=printer.snapshot())
        data = export_mesh(lens.part, "stl")
        design = services.design_create(owner=user, name="zoned_lens_60mm.stl", data=data, units="mm")
        with mock.patch("webapp.checks.tasks.run_check.delay"):
            check = services.check_create(owner=user, design=design, printer=printer, material=material,
                                          check_settings=settings)
        report = build_report(part=read_part(data, name=design.name, units="mm"), printer=printer.snapshot(),
                              material=material.snapshot(), settings=settings)
        services.report_store(check=check, report=report)
        checks.append(check)
    return user, checks


def _time(client, url: str, repeat: int) -> dict:
    from django.db import connection, reset_queries
    from django.test.utils import CaptureQueriesContext

    client.get(url)  # the first request compiles the templates
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        response = client.get(url)
        times.append(time.perf_counter() - t0)
        assert response.status_code == 200, (url, response.status_code)
    reset_queries()
    with CaptureQueriesContext(connection) as queries:
        client.get(url)
    return {"median_ms": round(1000 * statistics.median(times), 1), "max_ms": round(1000 * max(times), 1),
            "queries": len(queries)}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=30)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as var_dir:
        _setup_django(var_dir)
        from django.test import Client
        from django.urls import reverse

        user, (lens, other) = _finished_checks()
        client = Client()
        client.force_login(user)
        pages = {
            "report": reverse("check", args=[lens.public_id]),
            "designs": reverse("designs"),
            "design": reverse("design", args=[lens.design.public_id]),
            "compare": f"{reverse('compare')}?c={lens.public_id}&c={other.public_id}",
            "upload": reverse("upload"),
            "generate": reverse("generate", args=["zoned"]),
            "status_json": reverse("check_status", args=[lens.public_id]),
        }
        results = {name: _time(client, url, args.repeat) for name, url in pages.items()}
        t0 = time.perf_counter()
        client.get(reverse("check_pdf", args=[lens.public_id]))
        first_pdf = time.perf_counter() - t0
        results["pdf"] = {"first_ms": round(1000 * first_pdf, 1), **_time(client, reverse("check_pdf", args=[lens.public_id]), 5)}
        print(json.dumps({"repeat": args.repeat, "pages": results}))


if __name__ == "__main__":
    main()
