"""deploy/single-host.sh starts the production shape (gunicorn, two workers, PostgreSQL, Redis) and it works.

A designer signs in over HTTP, uploads a part, and the report comes back from one of the workers.
The script gets its own database, port, folder and Redis (it starts one on a free port), and stops them.
"""

import os
import re
import subprocess
from pathlib import Path

import pytest

from tests.reliability.helpers import box_stl
from tests.reliability.servers import answers, free_port, wait_until
from tests.reliability.webclient import WebClient

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[2]
SCRIPT = ROOT / "deploy" / "single-host.sh"
PASSWORD = "single-host-demo-1"


@pytest.fixture
def single_host(tmp_path):
    if not answers(5432):
        pytest.skip("PostgreSQL does not answer on 127.0.0.1:5432")
    port = free_port()
    db_name = f"phasewright_single_{os.getpid()}"
    env = {k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "REDIS_URL", "PHASEWRIGHT_VAR_DIR")}
    env |= {"PORT": str(port), "RUN_DIR": str(tmp_path / "run"), "DB_NAME": db_name, "REDIS_PORT": str(free_port()),
            "PHASEWRIGHT_DEMO_PASSWORD": PASSWORD, "STOP_WAIT_S": "30"}
    subprocess.run(["bash", str(SCRIPT), "start"], env=env, check=True, timeout=300, capture_output=True)
    try:
        yield f"http://127.0.0.1:{port}", tmp_path / "run"
    finally:
        subprocess.run(["bash", str(SCRIPT), "stop"], env=env, timeout=180, capture_output=True)
        subprocess.run(["psql", "postgres://postgres@127.0.0.1:5432/postgres", "-qc", f"DROP DATABASE IF EXISTS {db_name}"],
                       timeout=60, capture_output=True)


def test_the_single_host_shape_checks_an_upload(single_host):
    """Sign in, upload, poll the status, read the report: gunicorn, Redis, a worker and PostgreSQL all took part."""
    base, run_dir = single_host
    client = WebClient(base)
    client.login("designer", PASSWORD)
    fields = client.form_defaults("/designs/new/") | {"units": "mm", "freqs": "140", "quantities": "1",
                                                        "printer": "bay1-lcd-resin", "material": "standard-resin"}
    status, url, body = client.upload("/designs/new/", fields, "file", "box.stl", box_stl())
    assert status == 200, (fields, re.findall(rb"(?s)class=\"[^\"]*error[^\"]*\"[^>]*>(.{0,300})", body))
    public_id = re.search(r"/checks/([0-9a-f-]{36})/", url + body.decode()).group(1)
    state = wait_until(lambda: (s := client.json(f"/checks/{public_id}/status.json"))["status"] in ("done", "failed") and s,
                       timeout_s=180, every_s=0.5, what="the check ending")
    assert state["status"] == "done", state
    page_status, _, page = client.request(f"/checks/{public_id}/")
    assert page_status == 200 and b"box.stl" in page
    worker_logs = "".join((run_dir / f"worker-{i}.log").read_text() for i in (1, 2))
    assert "succeeded" in worker_logs
    assert sorted(p.name for p in run_dir.glob("worker-*.pid")) == ["worker-1.pid", "worker-2.pid"]
