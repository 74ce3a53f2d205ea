"""Phasewright's one settings module. Everything comes from the environment, parsed strictly.

With no environment at all it runs on SQLite and a broker in a local folder, "so one can just
check out the code and it works"; production sets DATABASE_URL, REDIS_URL and the secrets.
"""

import os
from pathlib import Path

import dj_database_url
from django.core.exceptions import ImproperlyConfigured

from services import limits

BASE_DIR = Path(__file__).resolve().parent.parent


def envbool(name: str, default: str) -> bool:
    value = os.environ.get(name, default)
    if value not in ("True", "False"):
        raise ValueError(f"{name} must be True or False, not {value!r}")
    return value == "True"


def envint(name: str, default: str) -> int:
    value = os.environ.get(name, default)
    if not value.strip().lstrip("-").isdigit():
        raise ValueError(f"{name} must be a whole number, not {value!r}")
    return int(value)


def envchoice(name: str, default: str, choices: tuple[str, ...]) -> str:
    value = os.environ.get(name, default)
    if value not in choices:
        raise ValueError(f"{name} must be one of {', '.join(choices)}, not {value!r}")
    return value


def envstr(name: str, default: str) -> str:
    return os.environ.get(name, default)


def envsecret(name: str, default: str) -> str:
    """Read NAME, or the file NAME_FILE points at (container secrets)."""
    path = os.environ.get(f"{name}_FILE")
    if path:
        return Path(path).read_text().strip()
    return os.environ.get(name, default)


DEBUG = envbool("PHASEWRIGHT_DEBUG", "True")
SECRET_KEY = envsecret("PHASEWRIGHT_SECRET_KEY", "dev-only-insecure-key-change-me-" + "x" * 20)
ALLOWED_HOSTS = [h for h in envstr("PHASEWRIGHT_ALLOWED_HOSTS", "127.0.0.1,localhost,testserver").split(",") if h]
SITE_ROOT = envstr("PHASEWRIGHT_SITE_ROOT", "http://127.0.0.1:8000")
CSRF_TRUSTED_ORIGINS = [SITE_ROOT]

# Production (DEBUG off) is HTTPS behind a reverse proxy; PHASEWRIGHT_HTTPS=False is only for a
# loopback demo such as deploy/single-host.sh, and `check --deploy` says so.
HTTPS = envbool("PHASEWRIGHT_HTTPS", "False" if DEBUG else "True")
if not DEBUG and (SECRET_KEY.startswith("dev-only-") or len(SECRET_KEY) < 50 or len(set(SECRET_KEY)) < 5):
    raise ImproperlyConfigured("PHASEWRIGHT_SECRET_KEY (or PHASEWRIGHT_SECRET_KEY_FILE) must hold a random string of "
                               "at least 50 characters when PHASEWRIGHT_DEBUG=False.")
if HTTPS and not SITE_ROOT.startswith("https://"):
    raise ImproperlyConfigured(f"PHASEWRIGHT_SITE_ROOT must start with https:// when PHASEWRIGHT_HTTPS=True, not {SITE_ROOT!r}.")
# The proxy terminates TLS and says so in X-Forwarded-Proto (deploy/nginx.conf sets it, overwriting the client's).
SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https") if HTTPS else None
SECURE_SSL_REDIRECT = HTTPS
SESSION_COOKIE_SECURE = CSRF_COOKIE_SECURE = HTTPS
SECURE_HSTS_SECONDS = envint("PHASEWRIGHT_HSTS_SECONDS", "31536000" if HTTPS else "0")
SECURE_HSTS_INCLUDE_SUBDOMAINS = envbool("PHASEWRIGHT_HSTS_INCLUDE_SUBDOMAINS", "True")
SECURE_HSTS_PRELOAD = envbool("PHASEWRIGHT_HSTS_PRELOAD", "True")
SESSION_COOKIE_AGE = envint("PHASEWRIGHT_SESSION_AGE_S", str(14 * 24 * 3600))
X_FRAME_OPTIONS = "DENY"
# Behind the proxy, REMOTE_ADDR is the proxy; the login rate limit then reads the address the proxy appended.
BEHIND_PROXY = envbool("PHASEWRIGHT_BEHIND_PROXY", "False" if DEBUG else "True")

# Everything the app writes (SQLite file, local broker, uploads, reports) lives under one folder;
# a test run (pytest sets PYTEST_VERSION) gets its own, so it never mixes with the demo's data, and each
# of a parallel run's processes (pytest-xdist sets PYTEST_XDIST_WORKER: gw0, gw1, ...) one of its own.
_TEST_VAR = "var/test" + (f"-{os.environ['PYTEST_XDIST_WORKER']}" if os.environ.get("PYTEST_XDIST_WORKER") else "")
VAR_DIR = Path(envstr("PHASEWRIGHT_VAR_DIR", str(BASE_DIR / (_TEST_VAR if os.environ.get("PYTEST_VERSION") else "var"))))
VAR_DIR.mkdir(parents=True, exist_ok=True)

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "webapp.accounts",
    "webapp.catalogue",
    "webapp.checks",
    "webapp.api",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "webapp.limits.RequestSizeLimitMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
]

ROOT_URLCONF = "webapp.urls"
WSGI_APPLICATION = "webapp.wsgi.application"
TEMPLATES = [{
    "BACKEND": "django.template.backends.django.DjangoTemplates",
    "DIRS": [BASE_DIR / "webapp" / "templates"],
    "APP_DIRS": True,
    "OPTIONS": {"context_processors": [
        "django.template.context_processors.request",
        "django.contrib.auth.context_processors.auth",
        "django.contrib.messages.context_processors.messages",
        "webapp.accounts.context.roles",
    ]},
}]

DATABASES = {"default": dj_database_url.parse(
    envstr("DATABASE_URL", f"sqlite:///{VAR_DIR / 'phasewright.sqlite3'}"), conn_max_age=envint("DB_CONN_MAX_AGE", "0"))}
if DATABASES["default"]["ENGINE"].endswith("sqlite3"):
    # A file, not memory, so a worker process started by a test sees the test database.
    DATABASES["default"]["TEST"] = {"NAME": str(VAR_DIR / "test-phasewright.sqlite3")}
    DATABASES["default"]["OPTIONS"] = {"timeout": 20, "transaction_mode": "IMMEDIATE"}
else:
    # Fail fast while the database is away (the task retries with backoff), and test a kept connection
    # before reusing it, so a database restart costs one retry rather than a broken process.
    DATABASES["default"].setdefault("OPTIONS", {})["connect_timeout"] = envint("DB_CONNECT_TIMEOUT_S", "5")
    DATABASES["default"]["CONN_HEALTH_CHECKS"] = True
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator", "OPTIONS": {"min_length": 10}},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
]
LOGIN_URL = "login"
LOGIN_REDIRECT_URL = "designs"
LOGOUT_REDIRECT_URL = "login"

LANGUAGE_CODE = "en-gb"
TIME_ZONE = "UTC"
USE_I18N = False
USE_TZ = True

STATIC_URL = "/static/"
STATIC_ROOT = VAR_DIR / "static"
STATICFILES_DIRS = [BASE_DIR / "webapp" / "static"]
STATIC_ROOT.mkdir(exist_ok=True)
# Designs and report files: every worker must reach them, so on more than one machine they live in an
# S3-compatible object store (django-storages), or in a folder every machine mounts. Never under
# STATIC_ROOT or any URL: downloads go through a view that checks the owner.
STORAGE_KIND = envchoice("PHASEWRIGHT_STORAGE", "local", ("local", "s3"))
STORAGE_DIR = Path(envstr("PHASEWRIGHT_STORAGE_DIR", str(VAR_DIR / "private")))
# Rigorous cell tables (services.optics.cell_tables) are cached here; web and worker must share it. The
# domain core reads the environment variable, so the setting is written back to it.
CELL_TABLE_DIR = Path(envstr("PHASEWRIGHT_CELL_TABLE_DIR", str(VAR_DIR / "cell-tables")))
os.environ["PHASEWRIGHT_CELL_TABLE_DIR"] = str(CELL_TABLE_DIR)
# A rerun of a check rewrites its report files under the same names (allow_overwrite, file_overwrite).
_LOCAL_STORAGE = {"BACKEND": "django.core.files.storage.FileSystemStorage",
                  "OPTIONS": {"location": str(STORAGE_DIR), "allow_overwrite": True,
                              "file_permissions_mode": 0o640, "directory_permissions_mode": 0o750}}
_S3_STORAGE = {"BACKEND": "storages.backends.s3.S3Storage", "OPTIONS": {
    "bucket_name": envstr("PHASEWRIGHT_S3_BUCKET", ""), "endpoint_url": envstr("PHASEWRIGHT_S3_ENDPOINT_URL", "") or None,
    "region_name": envstr("PHASEWRIGHT_S3_REGION", "") or None, "location": envstr("PHASEWRIGHT_S3_PREFIX", "phasewright"),
    "access_key": envsecret("PHASEWRIGHT_S3_ACCESS_KEY", ""), "secret_key": envsecret("PHASEWRIGHT_S3_SECRET_KEY", ""),
    "addressing_style": envchoice("PHASEWRIGHT_S3_ADDRESSING", "path", ("path", "virtual", "auto")),
    "default_acl": None, "querystring_auth": True, "file_overwrite": True}}
if STORAGE_KIND == "s3" and not _S3_STORAGE["OPTIONS"]["bucket_name"]:
    raise ImproperlyConfigured("PHASEWRIGHT_S3_BUCKET must name the bucket when PHASEWRIGHT_STORAGE=s3.")
STORAGES = {
    "default": _S3_STORAGE if STORAGE_KIND == "s3" else _LOCAL_STORAGE,
    "staticfiles": {"BACKEND": "whitenoise.storage.CompressedStaticFilesStorage" if not DEBUG
                    else "django.contrib.staticfiles.storage.StaticFilesStorage"},
}
WHITENOISE_USE_FINDERS = DEBUG

# Uploads: Django caps the non-file body; the file cap is ours (the proxy caps both in production).
PHASEWRIGHT_MAX_UPLOAD_BYTES = envint("PHASEWRIGHT_MAX_UPLOAD_BYTES", str(200 * 2**20))
PHASEWRIGHT_MAX_TRIANGLES = envint("PHASEWRIGHT_MAX_TRIANGLES", "5000000")
PHASEWRIGHT_MAX_EXTENT_MM = envint("PHASEWRIGHT_MAX_EXTENT_MM", "2000")
PHASEWRIGHT_MAX_ACTIVE_CHECKS = envint("PHASEWRIGHT_MAX_ACTIVE_CHECKS", "20")
# What one user's stored designs may add up to; an upload past it is refused with a sentence.
PHASEWRIGHT_STORAGE_QUOTA_BYTES = envint("PHASEWRIGHT_STORAGE_QUOTA_BYTES", str(2 * 2**30))
DATA_UPLOAD_MAX_NUMBER_FILES = 100
FILE_UPLOAD_MAX_MEMORY_SIZE = 5 * 2**20
# A whole request may carry one upload plus its form fields; the proxy's client_max_body_size is the same.
PHASEWRIGHT_MAX_REQUEST_BYTES = PHASEWRIGHT_MAX_UPLOAD_BYTES + 2**20

# The cache holds the login rate limiter's counters: shared through Redis when there is one, since each
# gunicorn process would otherwise count on its own.
CACHE_URL = envstr("PHASEWRIGHT_CACHE_URL", envstr("REDIS_URL", ""))
CACHES = {"default": {"BACKEND": "django.core.cache.backends.redis.RedisCache", "LOCATION": CACHE_URL,
                      "KEY_PREFIX": "phasewright"} if CACHE_URL else
          {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}}
# With a shared cache, sessions are read from it and written through to the database: one query less a page.
SESSION_ENGINE = "django.contrib.sessions.backends.cached_db" if CACHE_URL else "django.contrib.sessions.backends.db"
PHASEWRIGHT_LOGIN_FAILURES_PER_USER = envint("PHASEWRIGHT_LOGIN_FAILURES_PER_USER", "5")
PHASEWRIGHT_LOGIN_FAILURES_PER_ADDRESS = envint("PHASEWRIGHT_LOGIN_FAILURES_PER_ADDRESS", "20")
PHASEWRIGHT_LOGIN_WINDOW_S = envint("PHASEWRIGHT_LOGIN_WINDOW_S", "900")

# Celery: a real worker process in every setting; Redis when REDIS_URL is set, else a folder broker.
REDIS_URL = envstr("REDIS_URL", "")
CELERY_BROKER_URL = REDIS_URL or "filesystem://"
BROKER_DIR = VAR_DIR / "broker"
FOLDER_BROKER_OPTIONS = {
    "data_folder_in": str(BROKER_DIR / "queue"), "data_folder_out": str(BROKER_DIR / "queue"),
    "control_folder": str(BROKER_DIR / "control"), "processed_folder": str(BROKER_DIR / "processed"),
    "store_processed": False,
    # The worker lists the queue folder this often when idle (kombu's default is 1 s: a check queued just after a
    # listing waited up to a second before it started). Listing a folder five times a second costs nothing.
    "polling_interval": 0.2}
# Redis redelivers a message not acked within the visibility timeout: it must exceed the hard time limit.
VISIBILITY_TIMEOUT_S = envint("PHASEWRIGHT_VISIBILITY_TIMEOUT_S", "3600")
CELERY_BROKER_TRANSPORT_OPTIONS = {"visibility_timeout": VISIBILITY_TIMEOUT_S} if REDIS_URL else FOLDER_BROKER_OPTIONS
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_TASK_SOFT_TIME_LIMIT = envint("PHASEWRIGHT_CHECK_SOFT_LIMIT_S", str(limits.DEFAULT_TIME_LIMIT_S))
CELERY_TASK_TIME_LIMIT = envint("PHASEWRIGHT_CHECK_HARD_LIMIT_S", str(limits.DEFAULT_TIME_LIMIT_S + 60))
CELERY_WORKER_MAX_TASKS_PER_CHILD = 50
CELERY_WORKER_MAX_MEMORY_PER_CHILD = envint("PHASEWRIGHT_WORKER_MAX_MEMORY_KIB", "3000000")
CELERY_TASK_IGNORE_RESULT = True
CELERY_BROKER_CONNECTION_RETRY_ON_STARTUP = True
# A child imports the pipeline before it takes work (webapp/celery.py); allow for a busy machine.
CELERY_WORKER_PROC_ALIVE_TIMEOUT = 60.0
PHASEWRIGHT_MAX_ATTEMPTS = 3
# A worker's main process stamps the checks it holds every HEARTBEAT_S (webapp/checks/heartbeat.py); a check
# silent for STALE_AFTER_S lost its worker, and the sweeper (inside `manage.py serve`, or
# `requeue_stale_checks --every-s` in production) requeues it within SWEEP_EVERY_S more.
PHASEWRIGHT_HEARTBEAT_S = envint("PHASEWRIGHT_HEARTBEAT_S", "10")
PHASEWRIGHT_STALE_AFTER_S = envint("PHASEWRIGHT_STALE_AFTER_S", "45")
PHASEWRIGHT_SWEEP_EVERY_S = envint("PHASEWRIGHT_SWEEP_EVERY_S", "15")
if not 0 < 3 * PHASEWRIGHT_HEARTBEAT_S <= PHASEWRIGHT_STALE_AFTER_S:
    # Three missed beats before a live worker's check counts as lost: a busy database may delay one or two.
    raise ImproperlyConfigured("PHASEWRIGHT_STALE_AFTER_S must be at least 3 x PHASEWRIGHT_HEARTBEAT_S (and both above 0).")
if PHASEWRIGHT_SWEEP_EVERY_S <= 0:
    raise ImproperlyConfigured("PHASEWRIGHT_SWEEP_EVERY_S must be above 0.")
# Address space one check may add to its worker child (RLIMIT_AS above what the child holds once the
# pipeline is imported); past it an allocation fails and the check ends with a sentence. 0: no bound.
PHASEWRIGHT_CHECK_MEMORY_MIB = envint("PHASEWRIGHT_CHECK_MEMORY_MIB", str(limits.DEFAULT_MEMORY_MIB))
# Rules (and the estimate) in one thread beside optics in another; False runs them one after the other,
# for debugging or a memory-tight worker (side by side, a check holds both stages' working sets at once).
PHASEWRIGHT_CONCURRENT_STAGES = envbool("PHASEWRIGHT_CONCURRENT_STAGES", "True")
# Checks `manage.py serve` (make run) runs at once: its worker's pool processes, each with the memory bound
# above. Production sets the pool size on its workers' command line instead (deploy/systemd).
PHASEWRIGHT_SERVE_CHECKS_AT_ONCE = envint("PHASEWRIGHT_SERVE_CHECKS_AT_ONCE", str(min(2, os.cpu_count() or 1)))
if PHASEWRIGHT_SERVE_CHECKS_AT_ONCE < 1:
    raise ImproperlyConfigured("PHASEWRIGHT_SERVE_CHECKS_AT_ONCE must be 1 or more.")
if CELERY_TASK_SOFT_TIME_LIMIT >= CELERY_TASK_TIME_LIMIT:
    # Celery arms the hard limit only once the soft one has fired: a soft limit at or above it disables both.
    raise ImproperlyConfigured("PHASEWRIGHT_CHECK_SOFT_LIMIT_S must be below PHASEWRIGHT_CHECK_HARD_LIMIT_S.")
if REDIS_URL and VISIBILITY_TIMEOUT_S <= CELERY_TASK_TIME_LIMIT:
    raise ImproperlyConfigured("PHASEWRIGHT_VISIBILITY_TIMEOUT_S must exceed PHASEWRIGHT_CHECK_HARD_LIMIT_S, or Redis "
                               "hands a running check to a second worker.")

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": envstr("PHASEWRIGHT_LOG_LEVEL", "INFO")},
}
