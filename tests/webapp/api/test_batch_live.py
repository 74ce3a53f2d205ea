"""`phasewright batch` against a live site and a real worker: good, bad and hostile files, Ctrl-C, resume."""

import csv
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path
from unittest import mock

import pytest
from django.conf import settings

from services.cli import batch
from services.cli import main
from tests.webapp.parts import box_stl, finned_plate_stl
from tests.webapp.worker import broker, worker_process
from webapp.api.services import api_token_create
from webapp.checks.models import Check

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]

DATA = Path(__file__).resolve().parents[2] / "data"
ROOT = Path(__file__).resolve().parents[3]


@pytest.fixture
def parts(tmp_path):
    """A folder of two good meshes, random bytes and a ZIP bomb (its name sorts the files as listed here)."""
    folder = tmp_path / "parts"
    folder.mkdir()
    (folder / "a-box.stl").write_bytes(box_stl())
    (folder / "b-plate.stl").write_bytes(finned_plate_stl())
    shutil.copy(DATA / "bomb.3mf", folder / "c-bomb.3mf")
    (folder / "d-noise.stl").write_bytes(b"\x00garbage" * 100)
    return folder


def _args(folder, server, out):
    return ["batch", str(folder), "--server", server, "--printer", "bay1-lcd-resin", "--material", "standard-resin",
            "--units", "mm", "--freq-ghz", "140", "--jobs", "1", "--out", str(out), "--fail-on", "blocker"]


def _interrupt_after_first_row(folder, server, out, token) -> dict:
    """Run the command in a child process, press Ctrl-C once a file is finished; return the state it left."""
    state_path = out.with_name(out.name + ".state.json")
    env = {**os.environ, "PHASEWRIGHT_TOKEN": token}
    child = subprocess.Popen([sys.executable, "-m", "services.cli", *_args(folder, server, out)], env=env, cwd=ROOT,
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and child.poll() is None:
        if state_path.exists() and any(e.get("row") for e in json.loads(state_path.read_text())["files"].values()):
            break
        time.sleep(0.1)
    child.send_signal(signal.SIGINT)
    _, err = child.communicate(timeout=60)
    assert child.returncode == batch.EXIT_INTERRUPTED and b"run the same command again" in err, err
    return json.loads(state_path.read_text())["files"]


def test_a_folder_through_the_api_with_an_interruption(live_server, alice, seeded, parts, tmp_path, capsys):
    """Interrupted after a file and run again, the batch uploads only what was not done and reports every file."""
    _, token = api_token_create(user=alice, name="batch")
    out = tmp_path / "summary.csv"
    uploads = []
    real_send = batch.urllib_send

    def recording_send(method, url, headers, body, timeout_s):
        if method == "POST" and url.endswith("/designs"):
            uploads.append(body.split(b'filename="', 1)[1].split(b'"', 1)[0].decode())
        return real_send(method, url, headers, body, timeout_s)

    with broker("filesystem://", settings.FOLDER_BROKER_OPTIONS), worker_process():
        first = _interrupt_after_first_row(parts, live_server.url, out, token)
        os.environ["PHASEWRIGHT_TOKEN"] = token
        try:
            with mock.patch.object(batch, "urllib_send", recording_send):
                code = main(_args(parts, live_server.url, out))
        finally:
            del os.environ["PHASEWRIGHT_TOKEN"]
    done_before = {name for name, entry in first.items() if entry.get("design")}
    assert "a-box.stl" in done_before and not done_before & set(uploads)
    assert sorted(uploads + sorted(done_before)) == ["a-box.stl", "b-plate.stl", "c-bomb.3mf", "d-noise.stl"]
    _assert_summary(out, live_server.url)
    assert code == batch.EXIT_UNUSABLE and "d-noise.stl" in capsys.readouterr().out


def _assert_summary(out, server):
    with out.open() as fh:
        rows = {row["file"]: row for row in csv.DictReader(fh)}
    assert list(rows) == ["a-box.stl", "b-plate.stl", "c-bomb.3mf", "d-noise.stl"]
    box = Check.objects.get(design__name="a-box.stl")
    assert rows["a-box.stl"]["verdict"] == box.verdict == "printable"
    assert float(rows["a-box.stl"]["material_ml"]) == box.report["estimate"]["material_ml"]
    assert float(rows["a-box.stl"]["total_cost"]) == box.report["estimate"]["quantities"][0]["total"]
    assert rows["a-box.stl"]["report_url"] == f"{server}/checks/{box.public_id}/"
    # The plate's 0.1 mm fin is two pixels of a 50 um printer: a blocker by construction.
    assert rows["b-plate.stl"]["verdict"] == "not_printable" and int(rows["b-plate.stl"]["blockers"]) >= 1
    assert "ZIP bomb" in rows["c-bomb.3mf"]["error"] and rows["c-bomb.3mf"]["verdict"] == ""
    assert "d-noise.stl" in rows["d-noise.stl"]["error"]
    assert Check.objects.filter(design__name="c-bomb.3mf", status="failed", error_code="zip_bomb").count() == 1
