"""``phasewright batch FOLDER``: check every mesh in a folder through a Phasewright server's API.

Each file is uploaded, checked and waited for by one of ``jobs`` threads; the result is one row per
file. A small state file next to the summary records each file's check as soon as it exists and
its row once finished, so a run that was interrupted resumes without uploading again (and the
server returns the same design for the same bytes anyway). Network errors and 5xx answers are
retried with backoff, a 429 waits for its Retry-After, and any other 4xx is that file's error.

Standard library only: it runs on a lab machine that has nothing but Python.
"""

from __future__ import annotations

import argparse
import csv
import hashlib
import http.client
import io
import json
import os
import random
import sys
import threading
import time
import urllib.error
import urllib.parse
import urllib.request
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
from dataclasses import asdict, dataclass
from pathlib import Path

from services.cli.common import parse_freqs, without_name
from services.cli.requirements import add_requirement_options, requirements_from
from services.errors import UnusableInput

MESH_SUFFIXES = (".stl", ".3mf", ".obj", ".ply")
FINISHED = ("done", "failed", "cancelled")
# --fail-on level -> the verdicts that reach it.
FAIL_VERDICTS = {"blocker": ("not_printable",), "caution": ("not_printable", "printable_with_cautions")}
EXIT_OK, EXIT_FAIL_ON, EXIT_UNUSABLE, EXIT_INTERRUPTED = 0, 1, 2, 130
SUMMARY_FIELDS = ("file", "verdict", "meets_requirements", "blockers", "cautions", "material_ml", "print_time_s", "total_cost", "currency",
                  "report_url", "error")
STATE_VERSION = 1

# send(method, url, headers, body, timeout_s) -> (status, headers, body); raises OSError when the network fails.
Send = Callable[[str, str, dict, bytes | None, float], tuple[int, dict, bytes]]


@dataclass(frozen=True, slots=True)
class BatchOptions:
    """What one batch run checks against, and how patiently."""

    server: str
    token: str
    printer: str
    material: str
    units: str = ""
    quantity: int = 1
    freqs_ghz: tuple[float, ...] = ()
    recursive: bool = False
    jobs: int = 4
    fail_on: str | None = None
    poll_s: float = 1.0
    check_timeout_s: float = 3600.0
    requirements: dict | None = None

    def check_settings(self) -> dict:
        """Return the settings part of the check request (also what the state file is keyed on)."""
        settings = {"quantities": [self.quantity], "optics": {"freqs_ghz": list(self.freqs_ghz)}}
        if self.requirements:  # only when stated, so a state file from before requirements still matches
            settings["requirements"] = self.requirements
        return settings


@dataclass(frozen=True, slots=True)
class Row:
    """One file's line of the summary: its verdict and numbers, or the error that stopped it."""

    file: str
    verdict: str | None = None
    meets_requirements: str | None = None
    blockers: int | None = None
    cautions: int | None = None
    material_ml: float | None = None
    print_time_s: float | None = None
    total_cost: float | None = None
    currency: str | None = None
    report_url: str | None = None
    error: str | None = None

    def to_dict(self) -> dict:
        return asdict(self)


class ApiError(Exception):
    """A 4xx answer (other than 429) or an exhausted retry: this file's error, in one sentence."""

    def __init__(self, status: int, code: str, message: str) -> None:
        super().__init__(message)
        self.status, self.code, self.message = status, code, message


class Interrupted(Exception):
    """The run is stopping (Ctrl-C): leave what is recorded for the next run."""


def urllib_send(method: str, url: str, headers: dict, body: bytes | None, timeout_s: float) -> tuple[int, dict, bytes]:
    """Send one request with the standard library; an HTTP error status is an answer, not an exception."""
    request = urllib.request.Request(url, data=body, method=method, headers=headers)
    try:
        with urllib.request.urlopen(request, timeout=timeout_s) as response:
            return response.status, dict(response.headers), response.read()
    except urllib.error.HTTPError as exc:
        return exc.code, dict(exc.headers or {}), exc.read()
    except (urllib.error.URLError, http.client.HTTPException, TimeoutError) as exc:
        raise OSError(str(getattr(exc, "reason", exc))) from exc


class Client:
    """The few API calls the batch needs, with retries: network errors and 5xx back off, 429 waits."""

    def __init__(self, server: str, token: str, *, send: Send | None = None,
                 sleep: Callable[[float], None] = time.sleep,
                 rng: random.Random | None = None, retries: int = 5, backoff_s: float = 0.5, timeout_s: float = 120.0,
                 stop: threading.Event | None = None, clock: Callable[[], float] = time.monotonic) -> None:
        self.server = server.rstrip("/").removesuffix("/api/v1")
        self.base = self.server + "/api/v1/"
        self.token, self.send, self.sleep = token, send or urllib_send, sleep
        self.rng = rng or random.Random()
        self.retries, self.backoff_s, self.timeout_s = retries, backoff_s, timeout_s
        self.stop, self.clock = stop or threading.Event(), clock

    def call(self, method: str, path: str, *, body: bytes | None = None, content_type: str | None = None) -> dict:
        """Make one API call and return its JSON; raise ApiError for a 4xx or when retries run out.

        Sending a POST again after a lost answer is safe: the server returns the same design for the
        same bytes and the same check for the same request.
        """
        headers = {"Authorization": f"Bearer {self.token}", "Accept": "application/json"}
        if content_type:
            headers["Content-Type"] = content_type
        failures = 0
        while True:
            if self.stop.is_set():
                raise Interrupted()
            try:
                status, answer_headers, raw = self.send(method, self.base + path, headers, body, self.timeout_s)
            except OSError as exc:
                status, answer_headers, raw = 0, {}, str(exc).encode()
            if status < 300 and status != 0:
                return json.loads(raw or b"{}")
            if status == 429:
                self.pause(_retry_after_s(answer_headers))
                continue
            if 400 <= status < 500:
                raise _api_error(status, raw)
            failures += 1
            if failures > self.retries:
                what = (f"the server answered {status}" if status
                        else f"the network failed ({raw.decode(errors='replace')})")
                raise ApiError(status, "unreachable", f"Gave up after {failures} tries: {what}.")
            self.pause(min(30.0, self.backoff_s * 2 ** (failures - 1)) * (0.5 + self.rng.random() / 2))

    def pause(self, seconds: float) -> None:
        """Sleep in short steps, so Ctrl-C stops a long wait promptly."""
        end = self.clock() + seconds
        while not self.stop.is_set():
            left = end - self.clock()
            if left <= 0:
                return
            self.sleep(min(left, 0.5))
        raise Interrupted()

    def call_json(self, method: str, path: str, payload: dict) -> dict:
        return self.call(method, path, body=json.dumps(payload).encode(), content_type="application/json")

    def upload(self, name: str, data: bytes, units: str) -> dict:
        """Upload a mesh as multipart form data; return the design."""
        body, content_type = multipart({"units": units, "name": name}, ("file", name, data))
        return self.call("POST", "designs", body=body, content_type=content_type)


def _retry_after_s(headers: dict) -> float:
    value = {k.lower(): v for k, v in headers.items()}.get("retry-after", "5")
    try:
        return min(300.0, max(1.0, float(value)))
    except ValueError:
        return 5.0


def _api_error(status: int, raw: bytes) -> ApiError:
    try:
        body = json.loads(raw)
        return ApiError(status, str(body["code"]), str(body["message"]))
    except (ValueError, KeyError, TypeError):
        return ApiError(status, f"http_{status}", f"The server answered {status}.")


def multipart(fields: dict[str, str], file: tuple[str, str, bytes]) -> tuple[bytes, str]:
    """Encode form fields and one file as multipart/form-data; return the body and its content type."""
    field_name, file_name, data = file
    # A boundary made from the file's own hash cannot occur inside the file.
    boundary = "phasewright-" + hashlib.sha256(data).hexdigest()[:40]
    safe_name = file_name.replace('"', "_").replace("\r", "_").replace("\n", "_")
    out = io.BytesIO()
    for key, value in fields.items():
        out.write(f'--{boundary}\r\nContent-Disposition: form-data; name="{key}"\r\n\r\n{value}\r\n'.encode())
    out.write(f'--{boundary}\r\nContent-Disposition: form-data; name="{field_name}"; filename="{safe_name}"\r\n'
              "Content-Type: application/octet-stream\r\n\r\n".encode())
    out.write(data)
    out.write(f"\r\n--{boundary}--\r\n".encode())
    return out.getvalue(), f"multipart/form-data; boundary={boundary}"


class State:
    """The run's memory: per file, its hash, design, check and (once finished) row; saved after every change."""

    def __init__(self, path: Path, key: dict) -> None:
        self.path, self.key, self.lock = path, key, threading.Lock()
        self.files: dict[str, dict] = {}
        try:
            saved = json.loads(path.read_text())
        except (OSError, ValueError):
            saved = {}
        # A run against another server, printer, material or settings starts afresh.
        if saved.get("version") == STATE_VERSION and saved.get("key") == key:
            self.files = dict(saved.get("files") or {})

    def get(self, name: str, sha256: str) -> dict:
        """Return what is known of this file, or nothing if its bytes changed since."""
        with self.lock:
            entry = self.files.get(name) or {}
            return dict(entry) if entry.get("sha256") == sha256 else {}

    def record(self, name: str, sha256: str, **values) -> None:
        with self.lock:
            entry = self.files.get(name) or {}
            if entry.get("sha256") != sha256:
                entry = {"sha256": sha256}
            entry.update(values)
            self.files[name] = entry
            self._save()

    def _save(self) -> None:
        """Write to a side file and rename it over the old one, so an interruption never leaves half a file."""
        self.path.parent.mkdir(parents=True, exist_ok=True)
        tmp = self.path.with_name(self.path.name + ".tmp")
        tmp.write_text(json.dumps({"version": STATE_VERSION, "key": self.key, "files": self.files}, indent=1))
        os.replace(tmp, self.path)


def find_meshes(folder: Path, *, recursive: bool) -> list[Path]:
    """Return the mesh files in the folder (and its subfolders when recursive), in name order."""
    if not folder.is_dir():
        raise UnusableInput("no_folder", f"{folder}: no such folder.")
    candidates = folder.rglob("*") if recursive else folder.iterdir()
    meshes = sorted(p for p in candidates if p.is_file() and p.suffix.lower() in MESH_SUFFIXES
                    and not any(part.startswith(".") for part in p.relative_to(folder).parts))
    if not meshes:
        hint = "" if recursive else " (add --recursive to look in subfolders)"
        raise UnusableInput("no_meshes", f"{folder}: no STL, 3MF, OBJ or PLY files found{hint}.")
    return meshes


def state_path_for(out: Path | None, folder: Path) -> Path:
    """Keep the state beside the summary (or in the folder when there is no summary file)."""
    if out is not None:
        return out.with_name(out.name + ".state.json")
    return folder / ".phasewright-batch-state.json"


class Progress:
    """A bar redrawn in place on a terminal; one plain line per finished file otherwise."""

    def __init__(self, total: int, *, stream, tty: bool, clock: Callable[[], float] = time.monotonic) -> None:
        self.total, self.stream, self.tty, self.clock = total, stream, tty, clock
        self.fractions: dict[str, float] = {}
        self.finished = self.errors = 0
        self.lock, self.drawn_at = threading.Lock(), -1.0

    def update(self, name: str, fraction: float) -> None:
        with self.lock:
            self.fractions[name] = max(0.0, min(1.0, fraction))
            if self.tty and self.clock() - self.drawn_at >= 0.1:
                self._draw()

    def finish(self, row: Row) -> None:
        with self.lock:
            self.fractions[row.file] = 1.0
            self.finished += 1
            self.errors += row.error is not None
            if self.tty:
                self._draw()
            else:
                outcome = (f"ERROR: {without_name(row.error, row.file)}" if row.error
                           else f"{row.verdict} ({_count(row.blockers, 'blocker')}, {_count(row.cautions, 'caution')})")
                print(f"[{self.finished}/{self.total}] {row.file}: {outcome}", file=self.stream, flush=True)

    def _draw(self) -> None:
        share = sum(self.fractions.values()) / max(1, self.total)
        filled = int(round(30 * share))
        self.stream.write(f"\r[{'#' * filled}{'.' * (30 - filled)}] {self.finished}/{self.total} files"
                          f"{f', {self.errors} errors' if self.errors else ''} ")
        self.stream.flush()
        self.drawn_at = self.clock()

    def close(self) -> None:
        if self.tty:
            self.stream.write("\n")
            self.stream.flush()


def check_one(client: Client, opts: BatchOptions, folder: Path, path: Path, state: State, progress: Progress) -> Row:
    """Take one file to a row: upload, queue, wait, summarise (or pick up where a previous run stopped)."""
    name = path.relative_to(folder).as_posix()
    try:
        data = path.read_bytes()
    except OSError as exc:
        return Row(file=name, error=f"{name}: cannot read it ({exc.strerror or exc}).")
    sha256 = hashlib.sha256(data).hexdigest()
    entry = state.get(name, sha256)
    if entry.get("row"):
        return Row(**entry["row"])
    try:
        check = _submitted(client, opts, name, data, sha256, entry, state)
        row = row_from(_waited(client, opts, check, lambda f: progress.update(name, f)), name=name, opts=opts,
                       server=client.server)
    except ApiError as exc:
        row = Row(file=name, error=exc.message)
        if exc.code in ("unreachable", "timeout"):
            return row  # not the file's fault: the next run tries it again
    except (ValueError, KeyError, TypeError) as exc:
        return Row(file=name, error=f"The server's answer was not understood ({type(exc).__name__}: {exc}).")
    state.record(name, sha256, row=row.to_dict())
    return row


def _submitted(client: Client, opts: BatchOptions, name: str, data: bytes, sha256: str, entry: dict,
               state: State) -> dict:
    """Return the file's check: the one a previous run queued, or a new one (uploading only if needed)."""
    if entry.get("check"):
        try:
            return client.call("GET", f"checks/{entry['check']}")
        except ApiError as exc:
            if exc.status != 404:
                raise
    design = entry.get("design")
    for attempt in range(2):
        if not design:
            design = client.upload(Path(name).name, data, opts.units)["id"]
            state.record(name, sha256, design=design)
        request = {"design": design, "printer": opts.printer, "material": opts.material, **opts.check_settings()}
        try:
            check = client.call_json("POST", "checks", request)
            break
        except ApiError as exc:
            if exc.status != 404 or attempt:
                raise
            design = None  # the recorded design is gone from the server: upload again
    state.record(name, sha256, check=check["id"])
    return check


def _waited(client: Client, opts: BatchOptions, check: dict, on_progress: Callable[[float], None]) -> dict:
    """Poll the check until it is done, failed or cancelled."""
    deadline = client.clock() + opts.check_timeout_s
    while check["status"] not in FINISHED:
        on_progress(float(check.get("progress") or 0.0))
        if client.clock() > deadline:
            raise ApiError(0, "timeout", f"The check was still {check['status']} after {opts.check_timeout_s:.0f} s; "
                           "run the batch again later to pick it up.")
        client.pause(opts.poll_s)
        check = client.call("GET", f"checks/{check['id']}")
    return check


def row_from(check: dict, *, name: str, opts: BatchOptions, server: str) -> Row:
    """Return the summary row of a finished check."""
    url = server + check["links"]["page"]
    if check["status"] != "done":
        return Row(file=name, error=check.get("error") or f"The check was {check['status']}.", report_url=url)
    s = check["summary"]
    totals = {int(q["quantity"]): q["total"] for q in s.get("quote") or ()}
    total = totals.get(opts.quantity, s.get("cost_per_part") if opts.quantity == 1 else None)
    return Row(file=name, verdict=s["verdict"], meets_requirements=s.get("meets_requirements"), blockers=s["blockers"], cautions=s["cautions"],
               material_ml=s.get("material_ml"), print_time_s=s.get("print_time_s"), total_cost=total,
               currency=s.get("currency"), report_url=url)


def run_batch(folder: Path, opts: BatchOptions, *, out: Path | None = None, client: Client | None = None,
              stream=None, tty: bool | None = None) -> tuple[list[Row], int]:
    """Check every mesh in the folder; write the summary; return the rows and the exit status."""
    stream = stream or sys.stderr
    meshes = find_meshes(folder, recursive=opts.recursive)
    client = client or Client(opts.server, opts.token)
    _preflight(client, opts)
    key = {"server": client.server, "printer": opts.printer, "material": opts.material, "units": opts.units,
           "settings": opts.check_settings()}
    state = State(state_path_for(out, folder), key)
    progress = Progress(len(meshes), stream=stream, tty=stream.isatty() if tty is None else tty)
    try:
        rows = _run_all(client, opts, folder, meshes, state, progress)
    finally:
        progress.close()
    if out is not None:
        write_summary(rows, out)
    return rows, exit_code(rows, opts.fail_on)


def _preflight(client: Client, opts: BatchOptions) -> None:
    """Test the token, printer and material once, rather than failing every file the same way."""
    try:
        client.call("GET", "me")
    except ValueError:
        raise UnusableInput("bad_server", f"{client.server} did not answer like a Phasewright site; "
                            "check the address given with --server.") from None
    except ApiError as exc:
        if exc.status == 401:
            raise UnusableInput("bad_token", f"{client.server} refused the token; make a new one on your account "
                                "page and pass it with --token or PHASEWRIGHT_TOKEN.") from None
        raise UnusableInput(exc.code, exc.message) from None
    for kind, slug in (("printers", opts.printer), ("materials", opts.material)):
        try:
            client.call("GET", f"{kind}/{urllib.parse.quote(slug, safe='')}")
        except ApiError as exc:
            raise UnusableInput(exc.code, exc.message) from None


def _run_all(client: Client, opts: BatchOptions, folder: Path, meshes: list[Path], state: State,
             progress: Progress) -> list[Row]:
    """Run check_one over the files on ``jobs`` threads; on Ctrl-C stop them and keep what is recorded."""
    pool = ThreadPoolExecutor(max_workers=max(1, opts.jobs), thread_name_prefix="batch")
    futures = {pool.submit(check_one, client, opts, folder, path, state, progress): path for path in meshes}
    rows: dict[Path, Row] = {}
    try:
        pending = set(futures)
        while pending:
            finished, pending = wait(pending, timeout=0.5, return_when=FIRST_COMPLETED)
            for future in finished:
                rows[futures[future]] = future.result()
                progress.finish(rows[futures[future]])
    except (KeyboardInterrupt, Interrupted):
        client.stop.set()
        pool.shutdown(wait=True, cancel_futures=True)
        raise Interrupted() from None
    pool.shutdown()
    return [rows[path] for path in meshes]


def exit_code(rows: list[Row], fail_on: str | None) -> int:
    """Return 2 when any file could not be checked, else 1 when any reached the --fail-on level, else 0."""
    if any(row.error for row in rows):
        return EXIT_UNUSABLE
    if fail_on and any(row.verdict in FAIL_VERDICTS[fail_on] for row in rows):
        return EXIT_FAIL_ON
    return EXIT_OK


def write_summary(rows: list[Row], out: Path) -> None:
    """Write the rows as JSON (a .json name) or CSV (anything else), replacing the file in one step."""
    out.parent.mkdir(parents=True, exist_ok=True)
    if out.suffix.lower() == ".json":
        text = json.dumps([row.to_dict() for row in rows], indent=2)
    else:
        buffer = io.StringIO()
        writer = csv.DictWriter(buffer, fieldnames=SUMMARY_FIELDS, lineterminator="\n")
        writer.writeheader()
        writer.writerows(row.to_dict() for row in rows)
        text = buffer.getvalue()
    tmp = out.with_name(out.name + ".tmp")
    tmp.write_text(text)
    os.replace(tmp, out)


def format_table(rows: list[Row], *, width: int = 36) -> str:
    """Return a short plain-text table of the rows."""
    lines = [f"{'file':{width}}  {'verdict':23}  {'meets':13}  {'blk':>3}  {'cau':>3}  {'ml':>8}  {'time':>8}  {'cost':>10}"]
    for r in rows:
        name = r.file if len(r.file) <= width else "…" + r.file[-(width - 1):]
        if r.error:
            lines.append(f"{name:{width}}  ERROR: {without_name(r.error, r.file)[:80]}")
            continue
        cost = f"{r.total_cost:,.2f}" if r.total_cost is not None else "-"
        ml = f"{r.material_ml:.2f}" if r.material_ml is not None else "-"
        lines.append(f"{name:{width}}  {r.verdict:23}  {r.meets_requirements or '-':13}  {r.blockers:>3}  {r.cautions:>3}  {ml:>8}  "
                     f"{_duration(r.print_time_s):>8}  {cost:>10}")
    return "\n".join(lines)


def _duration(seconds: float | None) -> str:
    if seconds is None:
        return "-"
    return f"{seconds / 3600:.1f} h" if seconds >= 3600 else f"{seconds / 60:.0f} min"


def add_batch_parser(sub) -> None:
    """Add ``batch`` to the ``phasewright`` command."""
    p = sub.add_parser("batch", help="check every mesh in a folder through a Phasewright server")
    p.add_argument("folder", metavar="FOLDER")
    p.add_argument("--server", required=True, metavar="URL", help="the site's address, e.g. https://phasewright.example.org")
    p.add_argument("--token", help="personal API token (default: the PHASEWRIGHT_TOKEN environment variable)")
    p.add_argument("--printer", required=True, metavar="SLUG", help="printer profile slug on the server")
    p.add_argument("--material", required=True, metavar="SLUG", help="material slug on the server")
    p.add_argument("--recursive", action="store_true", help="look in subfolders too")
    p.add_argument("--jobs", type=_jobs, default=4, metavar="N", help="files in flight at once (1-32, default 4)")
    p.add_argument("--out", metavar="FILE", help="summary to write: .csv or .json (the state file goes beside it)")
    p.add_argument("--fail-on", choices=tuple(FAIL_VERDICTS), help="exit 1 when any file reaches this severity")
    p.add_argument("--units", choices=("mm", "um", "cm", "m", "inch"),
                   help="units of STL, OBJ and PLY files (default: not stated, mm assumed and flagged)")
    p.add_argument("--quantity", type=int, default=1, help="quantity the total cost is quoted for (default 1)")
    p.add_argument("--freq-ghz",
                   help="design frequencies: 140, 110,140,170 or 110:170:7 (default: the material's band)")
    add_requirement_options(p)


def _jobs(text: str) -> int:
    value = int(text)
    if not 1 <= value <= 32:
        raise argparse.ArgumentTypeError("--jobs must be from 1 to 32")
    return value


def cmd_batch(args, *, environ=os.environ, stdout=None) -> int:
    """Run ``phasewright batch`` and print the table; return the exit status."""

    token = args.token or environ.get("PHASEWRIGHT_TOKEN", "")
    if not token:
        raise UnusableInput("no_token", "Give a personal API token with --token or the PHASEWRIGHT_TOKEN "
                            "environment variable (make one on your account page).")
    opts = BatchOptions(server=args.server, token=token, printer=args.printer, material=args.material,
                        units=args.units or "", quantity=args.quantity, freqs_ghz=parse_freqs(args.freq_ghz),
                        recursive=args.recursive, jobs=args.jobs, fail_on=args.fail_on,
                        requirements=_stated(requirements_from(args)))
    _warn_if_plain_http(opts.server)
    out = Path(args.out) if args.out else None
    try:
        rows, code = run_batch(Path(args.folder), opts, out=out)
    except Interrupted:
        print("phasewright: interrupted; run the same command again to resume.", file=sys.stderr)
        return EXIT_INTERRUPTED
    stdout = stdout or sys.stdout
    print(format_table(rows), file=stdout)
    if out is not None:
        print(f"summary: {out}", file=stdout)
    return code


def _stated(requirements) -> dict | None:
    """Return the targets as the API takes them: only those given."""
    if requirements is None:
        return None
    return {k: v for k, v in requirements.to_dict().items() if v is not None and k != "source"}


def _warn_if_plain_http(server: str) -> None:
    """Warn when the token would cross a network unencrypted (a loopback address is fine)."""
    parts = urllib.parse.urlsplit(server)
    if parts.scheme not in ("http", "https") or not parts.hostname:
        raise UnusableInput("bad_server", f"{server!r} is not a web address; give one like https://phasewright.example.org.")
    if parts.scheme == "http" and parts.hostname not in ("localhost", "127.0.0.1", "::1"):
        print(f"phasewright: warning: {server} is plain http, so the token travels unencrypted.", file=sys.stderr)


def _count(n: int | None, noun: str) -> str:
    """Return "1 blocker", "2 blockers"."""
    return f"{n} {noun}{'' if n == 1 else 's'}"
