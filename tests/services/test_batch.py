"""The batch client against a fake API in memory: discovery, summary, exit codes, retries, resume.

The live test against a real server and worker is tests/webapp/api/test_batch_live.py.
"""

import csv
from dataclasses import replace
import email.parser
import email.policy
import hashlib
import io
import json
import random
import threading
import urllib.parse
from pathlib import Path

import pytest

from services.cli import batch
from services.cli.batch import BatchOptions, Client, run_batch
from services.cli import main
from services.errors import UnusableInput

SERVER = "http://127.0.0.1:9"
# What a file's first word makes the fake server answer.
OUTCOMES = {
    b"good": ("printable", 0, 0),
    b"caution": ("printable_with_cautions", 0, 2),
    b"blocker": ("not_printable", 1, 1),
}


def parse_multipart(body: bytes, content_type: str) -> dict:
    """Read a multipart/form-data body with the standard library's email parser (a reference outside batch.py)."""
    message = email.parser.BytesParser(policy=email.policy.HTTP).parsebytes(
        f"Content-Type: {content_type}\r\n\r\n".encode() + body)
    return {part.get_param("name", header="content-disposition"): (part.get_filename(), part.get_payload(decode=True))
            for part in message.iter_parts()}


class FakeApi:
    """Answer the batch client's calls the way the API does, and count them."""

    def __init__(self, *, polls_until_done=2, token="pw_fake"):
        self.token, self.polls_until_done = token, polls_until_done
        self.designs, self.checks, self.calls = {}, {}, []
        # (method, path prefix, answer), each used once; an answer is an OSError or (status, headers, body).
        self.faults: list = []
        self.lock = threading.Lock()

    def send(self, method, url, headers, body, timeout_s):
        path = urllib.parse.urlsplit(url).path.removeprefix("/api/v1/")
        with self.lock:
            self.calls.append((method, path))
            fault = next((f for f in self.faults if f[0] == method and path.startswith(f[1])), None)
            if fault:
                self.faults.remove(fault)
                if isinstance(fault[2], Exception):
                    raise fault[2]
                return fault[2]
            if headers.get("Authorization") != f"Bearer {self.token}":
                return self._json(401, {"code": "not_authenticated", "message": "Send a token."})
            return self._route(method, path, headers, body)

    def _json(self, status, payload, headers=None):
        return status, {"Content-Type": "application/json", **(headers or {})}, json.dumps(payload).encode()

    def _route(self, method, path, headers, body):
        if method == "GET" and path in ("me", "printers/bay1-lcd-resin", "materials/standard-resin"):
            return self._json(200, {"username": "alice"})
        if method == "GET" and path.startswith(("printers/", "materials/")):
            return self._json(404, {"code": "not_found", "message": f"There is no {path}."})
        if method == "POST" and path == "designs":
            return self._upload(parse_multipart(body, headers["Content-Type"]))
        if method == "POST" and path == "checks":
            return self._queue(json.loads(body))
        if method == "GET" and path.startswith("checks/"):
            return self._poll(path.split("/")[1])
        return self._json(404, {"code": "not_found", "message": "No such address."})

    def _upload(self, form):
        name, data = form["file"]
        design_id = "d-" + hashlib.sha256(data).hexdigest()[:12]
        created = design_id not in self.designs
        self.designs[design_id] = data
        return self._json(201 if created else 200, {"id": design_id, "name": name})

    def _queue(self, request):
        check_id = "c-" + request["design"][2:] + "-" + str(request["quantities"][0])
        created = check_id not in self.checks
        if created:
            self.checks[check_id] = {"design": request["design"], "polls": 0,
                                     "requirements": request.get("requirements")}
        return self._json(201 if created else 200, self._check(check_id))

    def _poll(self, check_id):
        if check_id not in self.checks:
            return self._json(404, {"code": "not_found", "message": "No such check."})
        self.checks[check_id]["polls"] += 1
        return self._json(200, self._check(check_id))

    def _check(self, check_id):
        state = self.checks[check_id]
        data = self.designs[state["design"]]
        base = {"id": check_id, "progress": 0.5, "error": None, "summary": None,
                "links": {"page": f"/checks/{check_id}/"}}
        if state["polls"] < self.polls_until_done:
            return {**base, "status": "running"}
        outcome = OUTCOMES.get(data.split()[0] if data.split() else b"")
        if outcome is None:
            return {**base, "status": "failed", "error": "The file is not a mesh."}
        verdict, blockers, cautions = outcome
        # The fake holds every stated set of targets missed; the real judgement is the server's.
        summary = {"verdict": verdict, "meets_requirements": "no" if state["requirements"] else "not_stated",
                   "blockers": blockers, "cautions": cautions, "material_ml": 1.5,
                   "print_time_s": 5400.0, "currency": "EUR", "cost_per_part": 12.5,
                   "quote": [{"quantity": 1, "total": 12.5, "per_part": 12.5}]}
        return {**base, "status": "done", "progress": 1.0, "summary": summary}

    def uploads(self):
        return [c for c in self.calls if c == ("POST", "designs")]


def _client(fake, sleeps=None, **kwargs):
    """Return a client of the fake API whose clock moves on only by what it sleeps, so waits are exact and instant."""
    sleeps = [] if sleeps is None else sleeps
    return Client(SERVER, fake.token, send=fake.send, sleep=sleeps.append, rng=random.Random(0),
                  clock=lambda: sum(sleeps), **kwargs)


def _opts(**kwargs):
    return BatchOptions(**{"server": SERVER, "token": "pw_fake", "printer": "bay1-lcd-resin",
                           "material": "standard-resin", "poll_s": 0.0, "jobs": 2, **kwargs})


@pytest.fixture
def folder(tmp_path):
    root = tmp_path / "parts"
    (root / "sub").mkdir(parents=True)
    (root / "a-good.stl").write_bytes(b"good a")
    (root / "b-caution.STL").write_bytes(b"caution b")
    (root / "c-noise.obj").write_bytes(b"\x00\x01 noise")
    (root / "sub" / "d-blocker.3mf").write_bytes(b"blocker d")
    (root / "notes.txt").write_text("not a mesh")
    (root / ".hidden.stl").write_bytes(b"good hidden")
    return root


def test_it_finds_the_meshes(folder):
    """Mesh suffixes in any case, subfolders only when recursive, hidden files and other files never."""
    names = [p.relative_to(folder).as_posix() for p in batch.find_meshes(folder, recursive=False)]
    assert names == ["a-good.stl", "b-caution.STL", "c-noise.obj"]
    assert len(batch.find_meshes(folder, recursive=True)) == 4
    (folder / "outer" / "inner").mkdir(parents=True)
    (folder / "outer" / "inner" / "e.ply").write_bytes(b"good e")
    with pytest.raises(UnusableInput, match="--recursive"):
        batch.find_meshes(folder / "outer", recursive=False)


def test_it_checks_a_folder_and_writes_the_summary(folder, tmp_path):
    """One row per file, in name order, with the numbers or the error; exit 2 because one file was unusable."""
    fake, out = FakeApi(), tmp_path / "summary.csv"
    rows, code = run_batch(folder, _opts(recursive=True), out=out, client=_client(fake), stream=io.StringIO(),
                           tty=False)
    with out.open() as fh:
        table = list(csv.DictReader(fh))
    assert [r["file"] for r in table] == ["a-good.stl", "b-caution.STL", "c-noise.obj", "sub/d-blocker.3mf"]
    assert list(table[0]) == list(batch.SUMMARY_FIELDS)
    assert (table[1]["verdict"], table[1]["cautions"], table[1]["total_cost"]) == (
        "printable_with_cautions", "2", "12.5")
    assert table[0]["report_url"] == f"{SERVER}/checks/{rows[0].report_url.split('/')[-2]}/"
    assert table[2]["error"] == "The file is not a mesh." and table[2]["verdict"] == ""
    assert code == batch.EXIT_UNUSABLE and len(fake.uploads()) == 4


@pytest.mark.parametrize("files, fail_on, expected", [
    ({"a.stl": b"good"}, None, 0),
    ({"a.stl": b"good", "b.stl": b"caution"}, "blocker", 0),
    ({"a.stl": b"good", "b.stl": b"caution"}, "caution", 1),
    ({"a.stl": b"blocker"}, "blocker", 1),
    ({"a.stl": b"blocker"}, None, 0),
    ({"a.stl": b"caution", "b.stl": b"noise"}, "caution", 2),
])
def test_the_exit_status_follows_the_worst_file(tmp_path, files, fail_on, expected):
    """0 when nothing reaches --fail-on, 1 when something does, 2 when any file was unusable."""
    for name, data in files.items():
        (tmp_path / name).write_bytes(data)
    _, code = run_batch(tmp_path, _opts(fail_on=fail_on), client=_client(FakeApi()), stream=io.StringIO(), tty=False)
    assert code == expected


def test_it_writes_json_when_asked(folder, tmp_path):
    """A .json summary is a list of row objects."""
    out = tmp_path / "summary.json"
    run_batch(folder, _opts(), out=out, client=_client(FakeApi()), stream=io.StringIO(), tty=False)
    rows = json.loads(out.read_text())
    assert [r["file"] for r in rows] == ["a-good.stl", "b-caution.STL", "c-noise.obj"]
    assert rows[0]["verdict"] == "printable" and rows[0]["material_ml"] == 1.5


def test_requirements_travel_with_each_check_and_come_back_as_a_column(folder, tmp_path):
    """--max-thickness-mm reaches the check request; the server's answer fills meets_requirements in the CSV."""
    fake, out = FakeApi(), tmp_path / "summary.csv"
    opts = _opts(requirements={"max_thickness_mm": 1.0})
    rows, _ = run_batch(folder, opts, out=out, client=_client(fake), stream=io.StringIO(), tty=False)
    with out.open() as fh:
        table = list(csv.DictReader(fh))
    assert [r["meets_requirements"] for r in table] == ["no", "no", ""]
    assert all(c["requirements"] == {"max_thickness_mm": 1.0} for c in fake.checks.values())
    header, first = batch.format_table(rows).splitlines()[:2]
    assert header.split()[2] == "meets" and first.split()[2] == "no"
    # The longest answer keeps the columns after it in line with their heads.
    longest = replace(rows[0], meets_requirements="not_evaluated")
    head, line = batch.format_table([longest]).splitlines()
    at = head.index("blk")
    assert line[at:at + 3].strip() == str(longest.blockers) and "not_evaluated" in line


def test_it_retries_network_errors_and_5xx_with_growing_waits(tmp_path):
    """Two dropped connections and a 503 are retried after waits that double (with jitter); then it succeeds."""
    (tmp_path / "a.stl").write_bytes(b"good")
    fake, sleeps = FakeApi(), []
    fake.faults = [("POST", "designs", OSError("connection reset")), ("POST", "designs", OSError("timed out")),
                   ("POST", "designs", (503, {}, b"busy"))]
    client = _client(fake, sleeps, backoff_s=1.0)
    rows, code = run_batch(tmp_path, _opts(), client=client, stream=io.StringIO(), tty=False)
    assert code == 0 and rows[0].verdict == "printable" and len(fake.uploads()) == 4
    rng = random.Random(0)
    expected = [base * (0.5 + rng.random() / 2) for base in (1.0, 2.0, 4.0)]
    assert sum(sleeps) == pytest.approx(sum(expected))


def test_it_gives_up_after_the_retries_and_tries_again_next_run(tmp_path):
    """A server that keeps failing makes that file's row an error, not recorded, so the next run retries it."""
    (tmp_path / "a.stl").write_bytes(b"good")
    fake = FakeApi()
    fake.faults = [("POST", "designs", (502, {}, b"bad gateway"))] * 3
    out = tmp_path / "s.csv"
    rows, code = run_batch(tmp_path, _opts(), out=out, client=_client(fake, retries=2), stream=io.StringIO(), tty=False)
    assert code == 2 and rows[0].error == "Gave up after 3 tries: the server answered 502."
    rows, code = run_batch(tmp_path, _opts(), out=out, client=_client(fake), stream=io.StringIO(), tty=False)
    assert code == 0 and rows[0].verdict == "printable"


def test_it_waits_as_long_as_a_429_asks(tmp_path):
    """A 429 with Retry-After: 7 waits 7 s and asks again, without counting it as a failure."""
    (tmp_path / "a.stl").write_bytes(b"good")
    fake, sleeps = FakeApi(polls_until_done=0), []
    fake.faults = [("POST", "checks", (429, {"Retry-After": "7"}, b'{"code": "too_many_checks", "message": "wait"}'))]
    rows, _ = run_batch(tmp_path, _opts(), client=_client(fake, sleeps, retries=0), stream=io.StringIO(), tty=False)
    assert rows[0].verdict == "printable" and sum(sleeps) == pytest.approx(7.0)


def test_a_4xx_is_that_files_error(tmp_path):
    """A 413 for one file is its row's error (the server's sentence); the other file is checked."""
    (tmp_path / "a.stl").write_bytes(b"good")
    (tmp_path / "b.stl").write_bytes(b"good too")
    fake = FakeApi()
    too_large = b'{"code": "too_large", "message": "b.stl: 300 MB is over the limit."}'
    fake.faults = [("POST", "designs", (413, {}, too_large))]
    rows, code = run_batch(tmp_path, _opts(jobs=1), client=_client(fake), stream=io.StringIO(), tty=False)
    assert rows[0].error == "b.stl: 300 MB is over the limit." and rows[1].verdict == "printable" and code == 2


def test_it_refuses_a_bad_token_or_slug_up_front(tmp_path):
    """A refused token or an unknown printer stops the run before any upload, with a sentence."""
    (tmp_path / "a.stl").write_bytes(b"good")
    fake = FakeApi()
    wrong = _client(fake)
    wrong.token = "pw_revoked"
    with pytest.raises(UnusableInput, match="refused the token"):
        run_batch(tmp_path, _opts(), client=wrong, stream=io.StringIO())
    with pytest.raises(UnusableInput, match="printers/bay9"):
        run_batch(tmp_path, BatchOptions(server=SERVER, token="pw_fake", printer="bay9", material="standard-resin"),
                  client=_client(FakeApi()), stream=io.StringIO())
    assert not fake.uploads()


def test_it_resumes_without_uploading_again(folder, tmp_path):
    """Interrupted after one file, a second run finishes the rest and uploads nothing that was done."""
    fake, out = FakeApi(), tmp_path / "summary.csv"
    first = _client(fake)
    original = fake.send

    def stop_after_first_result(method, url, headers, body, timeout_s):
        answer = original(method, url, headers, body, timeout_s)
        if b'"status": "done"' in answer[2]:
            first.stop.set()  # what Ctrl-C does
        return answer

    first.send = stop_after_first_result
    with pytest.raises(batch.Interrupted):
        run_batch(folder, _opts(jobs=1), out=out, client=first, stream=io.StringIO(), tty=False)
    state = json.loads(out.with_name("summary.csv.state.json").read_text())["files"]
    finished = [name for name, entry in state.items() if entry.get("row")]
    assert finished == ["a-good.stl"]
    fake.calls.clear()
    rows, _ = run_batch(folder, _opts(jobs=1), out=out, client=_client(fake), stream=io.StringIO(), tty=False)
    assert [r.file for r in rows] == ["a-good.stl", "b-caution.STL", "c-noise.obj"] and rows[0].verdict == "printable"
    assert len(fake.uploads()) == 2 and ("GET", "checks/" + state["a-good.stl"]["check"]) not in fake.calls


def test_it_picks_up_a_queued_check_without_uploading(tmp_path):
    """A file whose check was queued by an earlier run is only polled; a changed file is uploaded again."""
    (tmp_path / "a.stl").write_bytes(b"good")
    fake, out = FakeApi(), tmp_path / "s.json"
    run_batch(tmp_path, _opts(), out=out, client=_client(fake), stream=io.StringIO(), tty=False)
    state_path = out.with_name("s.json.state.json")
    state = json.loads(state_path.read_text())
    del state["files"]["a.stl"]["row"]
    state_path.write_text(json.dumps(state))
    fake.calls.clear()
    run_batch(tmp_path, _opts(), out=out, client=_client(fake), stream=io.StringIO(), tty=False)
    assert not fake.uploads() and ("GET", "checks/" + state["files"]["a.stl"]["check"]) in fake.calls
    (tmp_path / "a.stl").write_bytes(b"caution now")
    rows, _ = run_batch(tmp_path, _opts(), out=out, client=_client(fake), stream=io.StringIO(), tty=False)
    assert len(fake.uploads()) == 1 and rows[0].verdict == "printable_with_cautions"


def test_another_printer_starts_afresh(tmp_path):
    """The state of a run on another printer is not reused."""
    (tmp_path / "a.stl").write_bytes(b"good")
    fake, out = FakeApi(), tmp_path / "s.csv"
    run_batch(tmp_path, _opts(), out=out, client=_client(fake), stream=io.StringIO(), tty=False)
    state = batch.State(out.with_name("s.csv.state.json"), {"printer": "other"})
    assert state.files == {}


def test_progress_is_plain_lines_off_a_terminal_and_a_bar_on_one(tmp_path):
    """Off a terminal each finished file is one line; on a terminal a bar is redrawn in place."""
    (tmp_path / "a.stl").write_bytes(b"good")
    (tmp_path / "b.stl").write_bytes(b"noise")
    plain, bar = io.StringIO(), io.StringIO()
    run_batch(tmp_path, _opts(jobs=1), client=_client(FakeApi()), stream=plain, tty=False)
    run_batch(tmp_path, _opts(jobs=1), client=_client(FakeApi()), stream=bar, tty=True)
    assert plain.getvalue().splitlines() == ["[1/2] a.stl: printable (0 blockers, 0 cautions)",
                                             "[2/2] b.stl: ERROR: The file is not a mesh."]
    assert "\r[" + "#" * 30 + "] 2/2 files, 1 errors" in bar.getvalue() and bar.getvalue().endswith("\n")


def test_the_multipart_body_reads_back(tmp_path):
    """The upload body parses (stdlib email parser) into the same fields and bytes, whatever the bytes."""
    data = bytes(range(256)) * 4 + b"\r\n--"
    body, content_type = batch.multipart({"units": "mm", "name": 'odd "name".stl'}, ("file", 'odd "name".stl', data))
    form = parse_multipart(body, content_type)
    assert form["file"] == ('odd _name_.stl', data)
    assert form["units"][1] == b"mm"


def test_the_command_takes_the_token_from_the_environment(folder, monkeypatch, capsys, tmp_path):
    """`phasewright batch` reads PHASEWRIGHT_TOKEN, prints a table and exits with the batch's status."""
    fake = FakeApi(polls_until_done=0)
    monkeypatch.setattr(batch, "urllib_send", fake.send)
    monkeypatch.setenv("PHASEWRIGHT_TOKEN", "pw_fake")
    code = main(["batch", str(folder), "--server", SERVER, "--printer", "bay1-lcd-resin", "--material",
                 "standard-resin", "--out", str(tmp_path / "s.csv"), "--fail-on", "caution"])
    out = capsys.readouterr().out
    assert code == 2 and "a-good.stl" in out and "ERROR: The file is not a mesh." in out and "summary:" in out
    monkeypatch.delenv("PHASEWRIGHT_TOKEN")
    assert main(["batch", str(folder), "--server", SERVER, "--printer", "x", "--material", "y"]) == 2
    assert "PHASEWRIGHT_TOKEN" in capsys.readouterr().err


def test_it_warns_before_sending_a_token_over_plain_http(capsys):
    """http to another host earns a warning; loopback does not; a non-address is refused."""
    batch._warn_if_plain_http("http://127.0.0.1:8000")
    assert capsys.readouterr().err == ""
    batch._warn_if_plain_http("http://lab-server:8000")
    assert "unencrypted" in capsys.readouterr().err
    with pytest.raises(UnusableInput):
        batch._warn_if_plain_http("lab-server")


def test_the_table_is_short_and_readable():
    """The printed table has one line per file and formats hours, minutes and money."""
    rows = [batch.Row(file="a.stl", verdict="printable", blockers=0, cautions=1, material_ml=1.234, print_time_s=5400,
                      total_cost=12.5), batch.Row(file="b.stl", error="b.stl: the file is empty.")]
    lines = batch.format_table(rows).splitlines()
    assert len(lines) == 3 and "1.5 h" in lines[1] and "12.50" in lines[1]
    assert lines[2].endswith("  ERROR: the file is empty.")  # the file is named once, in its column


def test_the_state_file_is_replaced_whole(tmp_path):
    """Saving writes a side file and renames it: no half-written state, no side file left behind."""
    state = batch.State(tmp_path / "s.state.json", {"k": 1})
    state.record("a.stl", "abc", check="c-1")
    assert json.loads((tmp_path / "s.state.json").read_text())["files"]["a.stl"] == {"sha256": "abc", "check": "c-1"}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.state.json"]
    assert batch.State(tmp_path / "s.state.json", {"k": 1}).get("a.stl", "other-hash") == {}


def test_files_are_named_relative_to_the_folder(folder):
    """Rows name files by their path inside the folder, with forward slashes."""
    rows, _ = run_batch(folder, _opts(recursive=True), client=_client(FakeApi()), stream=io.StringIO(), tty=False)
    assert "sub/d-blocker.3mf" in [r.file for r in rows]
    assert not any(Path(r.file).is_absolute() for r in rows)


def test_a_server_that_is_not_phasewright_is_named(tmp_path):
    """An address that answers HTML instead of the API stops the run with a sentence naming it."""
    (tmp_path / "a.stl").write_bytes(b"good")
    client = Client(SERVER, "pw_fake", send=lambda *a: (200, {"Content-Type": "text/html"}, b"<html>hello</html>"))
    with pytest.raises(UnusableInput, match="did not answer like a Phasewright site"):
        run_batch(tmp_path, _opts(), client=client, stream=io.StringIO())
