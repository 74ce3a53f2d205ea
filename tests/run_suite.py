"""Run the whole suite the way CI does: PostgreSQL when one answers on 127.0.0.1:5432, and SQLite.

The full suite runs once, on PostgreSQL if it answers (trust auth, database ``test``), else on
SQLite; when PostgreSQL was used, the database tests run a second time on SQLite so both paths
are exercised. Extra arguments go to pytest (e.g. ``-m "not slow"``).

Each pass runs in two parts: the tests not marked ``serial`` in parallel, one pytest-xdist process per core
(up to four), each with its own test database and var folder; then the ``serial`` ones (workers, servers,
the browser, service outages) one at a time, so no other test's load decides them.
"""

import os
import socket
import subprocess
import sys

PG_URL = "postgres://postgres@127.0.0.1:5432/test"


def answers(host: str, port: int) -> bool:
    try:
        with socket.create_connection((host, port), timeout=1):
            return True
    except OSError:
        return False


def pytest(args: list[str], env: dict) -> int:
    code = subprocess.call([sys.executable, "-m", "pytest", *args], env=env)
    return 0 if code == 5 else code  # 5: nothing collected under this selection


def in_two_parts(args: list[str], env: dict) -> int:
    """Run the selection's parallel part, then its serial part; return the first failure's code."""
    args, marks = _split_marks(args)
    processes = min(os.cpu_count() or 1, 4)
    parallel = ["-n", str(processes)] if processes > 1 else []
    first = pytest([*parallel, "-m", _and(marks, "not serial"), *args], env)
    second = pytest(["-m", _and(marks, "serial"), *args], env)
    return first or second


def _split_marks(args: list[str]) -> tuple[list[str], str | None]:
    """Return the arguments without their ``-m`` expression, and that expression (None: none given)."""
    rest, marks, it = [], None, iter(args)
    for arg in it:
        if arg == "-m":
            marks = next(it, None)
        elif arg.startswith("-m") and len(arg) > 2:
            marks = arg[2:]
        else:
            rest.append(arg)
    return rest, marks


def _and(marks: str | None, extra: str) -> str:
    return f"({marks}) and {extra}" if marks else extra


def main() -> int:
    extra = sys.argv[1:]
    env = {k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "REDIS_URL")}
    if answers("127.0.0.1", 5432):
        print(f"== full suite on PostgreSQL ({PG_URL})", flush=True)
        first = in_two_parts(extra, {**env, "DATABASE_URL": PG_URL})
        print("== database tests again on SQLite", flush=True)
        second = in_two_parts(["tests/webapp", "-m", "not slow and not e2e", *extra], env)
        # make run's shape (folder broker and SQLite) is killed 20 times in its own pass; the Redis shape ran above.
        print("== killed workers, make run's shape (SQLite)", flush=True)
        third = pytest(["tests/reliability/test_killed_workers.py", "-k", "embedded", *extra], env)
        return first or second or third
    print("== full suite on SQLite (no PostgreSQL on 127.0.0.1:5432)", flush=True)
    return in_two_parts(extra, env)


if __name__ == "__main__":
    sys.exit(main())
