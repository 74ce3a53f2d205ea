#!/usr/bin/env bash
# Start (or stop) Phasewright's production shape on this one machine, for tests and demos:
# PostgreSQL and Redis on 127.0.0.1, gunicorn, two or more check workers that share nothing but the
# database, the broker and the storage folder, and the sweeper (requeue_stale_checks --every-s 15).
#
#   deploy/single-host.sh start     # then open http://127.0.0.1:$PORT/ (user "designer", password printed)
#   deploy/single-host.sh status
#   deploy/single-host.sh stop
#
# Settings (environment): PORT (8040), WORKERS (2), RUN_DIR (var/single-host), DB_NAME
# (phasewright_single), PG_URL (postgres://postgres@127.0.0.1:5432), REDIS_PORT (6379), REDIS_DB (2),
# PHASEWRIGHT_DEMO_PASSWORD (random when unset), and any PHASEWRIGHT_* setting, passed through.
# Plain http on loopback (PHASEWRIGHT_HTTPS=False): the real site sits behind nginx with TLS.
set -euo pipefail

ROOT="$(cd "$(dirname "$0")/.." && pwd)"
PY="$ROOT/.venv/bin/python"
PORT="${PORT:-8040}"
WORKERS="${WORKERS:-2}"
RUN_DIR="$(mkdir -p "${RUN_DIR:-$ROOT/var/single-host}" && cd "${RUN_DIR:-$ROOT/var/single-host}" && pwd)"
DB_NAME="${DB_NAME:-phasewright_single}"
PG_URL="${PG_URL:-postgres://postgres@127.0.0.1:5432}"
REDIS_PORT="${REDIS_PORT:-6379}"
REDIS_DB="${REDIS_DB:-2}"

say() { printf 'single-host: %s\n' "$*"; }
answers() { (exec 3<>"/dev/tcp/127.0.0.1/$1") 2>/dev/null; }

write_env() {
  [ -s "$RUN_DIR/secret_key" ] || "$PY" -c "import secrets; print(secrets.token_urlsafe(64))" > "$RUN_DIR/secret_key"
  chmod 600 "$RUN_DIR/secret_key"
  cat > "$RUN_DIR/env" <<ENV
PHASEWRIGHT_DEBUG=False
PHASEWRIGHT_HTTPS=False
PHASEWRIGHT_BEHIND_PROXY=False
PHASEWRIGHT_SECRET_KEY_FILE=$RUN_DIR/secret_key
PHASEWRIGHT_SITE_ROOT=http://127.0.0.1:$PORT
PHASEWRIGHT_ALLOWED_HOSTS=127.0.0.1,localhost
DATABASE_URL=$PG_URL/$DB_NAME
DB_CONN_MAX_AGE=60
REDIS_URL=redis://127.0.0.1:$REDIS_PORT/$REDIS_DB
PHASEWRIGHT_STORAGE=local
PHASEWRIGHT_STORAGE_DIR=$RUN_DIR/storage
PHASEWRIGHT_BIND=127.0.0.1:$PORT
PHASEWRIGHT_ACCESS_LOG=$RUN_DIR/web-access.log
ENV
}

# The env file wins for what it names; other PHASEWRIGHT_* settings pass through from the caller.
load_env() {
  set -a
  # shellcheck disable=SC1091
  . "$RUN_DIR/env"
  set +a
}

start_bg() {  # name, var dir, command...: run detached in its own session, remember the pid
  local name="$1" var="$2"; shift 2
  mkdir -p "$var"
  PHASEWRIGHT_VAR_DIR="$var" setsid "$@" >>"$RUN_DIR/$name.log" 2>&1 < /dev/null &
  echo $! > "$RUN_DIR/$name.pid"
}

need_services() {
  answers 5432 || { say "PostgreSQL does not answer on 127.0.0.1:5432; start it first"; exit 1; }
  if ! answers "$REDIS_PORT"; then
    say "no Redis on 127.0.0.1:$REDIS_PORT: starting one with deploy/redis-phasewright.conf (append-only file in $RUN_DIR/redis)"
    mkdir -p "$RUN_DIR/redis"
    redis-server "$ROOT/deploy/redis-phasewright.conf" --port "$REDIS_PORT" --bind 127.0.0.1 --dir "$RUN_DIR/redis" \
      --daemonize yes --pidfile "$RUN_DIR/redis.pid" --logfile "$RUN_DIR/redis.log"
    for _ in $(seq 1 50); do answers "$REDIS_PORT" && break; sleep 0.1; done
  elif command -v redis-cli >/dev/null && ! redis-cli -p "$REDIS_PORT" config get appendonly 2>/dev/null | grep -qx yes; then
    say "warning: the Redis on 127.0.0.1:$REDIS_PORT keeps no append-only file; queued checks wait for the sweeper after a restart (see deploy/redis-phasewright.conf)"
  fi
  psql "$PG_URL/postgres" -tAc "SELECT 1 FROM pg_database WHERE datname = '$DB_NAME'" | grep -q 1 \
    || psql "$PG_URL/postgres" -qc "CREATE DATABASE $DB_NAME"
}

start() {
  if [ -s "$RUN_DIR/web.pid" ] && kill -0 "$(cat "$RUN_DIR/web.pid")" 2>/dev/null; then
    say "already running (web pid $(cat "$RUN_DIR/web.pid")); stop it first"; exit 1
  fi
  need_services
  write_env
  load_env
  cd "$ROOT"
  export PHASEWRIGHT_VAR_DIR="$RUN_DIR/web"
  "$PY" manage.py migrate --noinput >"$RUN_DIR/migrate.log"
  "$PY" manage.py collectstatic --noinput >/dev/null
  "$PY" manage.py seed_demo | tee "$RUN_DIR/seed.log"
  start_bg web "$RUN_DIR/web" "$ROOT/.venv/bin/gunicorn" -c deploy/gunicorn.conf.py webapp.wsgi
  for i in $(seq 1 "$WORKERS"); do
    # Each worker: its own folder, one check at a time, one numerical thread, below the site in priority.
    start_bg "worker-$i" "$RUN_DIR/worker-$i" env OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 MKL_NUM_THREADS=1 \
      MALLOC_ARENA_MAX=2 nice -n 10 "$ROOT/.venv/bin/celery" -A webapp worker --concurrency 1 --loglevel INFO \
      --hostname "single-$i@%h" --without-gossip --without-mingle
  done
  start_bg maintenance "$RUN_DIR/maintenance" "$PY" manage.py requeue_stale_checks --every-s "${PHASEWRIGHT_SWEEP_EVERY_S:-15}"
  for _ in $(seq 1 100); do answers "$PORT" && break; sleep 0.2; done
  answers "$PORT" || { say "gunicorn did not answer on port $PORT; see $RUN_DIR/web.log"; stop; exit 1; }
  say "site on http://127.0.0.1:$PORT/ with $WORKERS workers; logs and pids in $RUN_DIR"
}

stop_pid() {  # name: TERM (a worker finishes its check first), then KILL after the wait
  local file="$RUN_DIR/$1.pid" pid
  [ -s "$file" ] || return 0
  pid="$(cat "$file")"
  if kill -0 "$pid" 2>/dev/null; then
    kill -TERM -- "-$pid" 2>/dev/null || kill -TERM "$pid" 2>/dev/null || true
    for _ in $(seq 1 "${STOP_WAIT_S:-60}"); do kill -0 "$pid" 2>/dev/null || break; sleep 1; done
    kill -KILL -- "-$pid" 2>/dev/null || true
  fi
  rm -f "$file"
}

stop() {
  stop_pid web
  stop_pid maintenance
  for file in "$RUN_DIR"/worker-*.pid; do [ -e "$file" ] && stop_pid "$(basename "$file" .pid)"; done
  if [ -s "$RUN_DIR/redis.pid" ]; then kill -TERM "$(cat "$RUN_DIR/redis.pid")" 2>/dev/null || true; rm -f "$RUN_DIR/redis.pid"; fi
  say "stopped"
}

status() {
  for file in "$RUN_DIR"/*.pid; do
    [ -e "$file" ] || continue
    if kill -0 "$(cat "$file")" 2>/dev/null; then state=running; else state=gone; fi
    say "$(basename "$file" .pid): pid $(cat "$file") $state"
  done
}

case "${1:-}" in
  start) start ;;
  stop) stop ;;
  status) status ;;
  *) echo "usage: $0 start|stop|status" >&2; exit 2 ;;
esac
