"""Phasewright's one settings module. Everything comes from the environment, parsed strictly.

With no environment at all it runs on SQLite and a broker in a local folder, "so one can just
check out the code and it works"; production sets DATABASE_URL, REDIS_URL and the secrets.
"""

import os
from pathlib import Path

import dj_database_url

BASE_DIR = Path(__file__).resolve().parent.parent


def envbool(name: str, default: str) -> bool:
    value = os.environ.get(name, default)
    if value not in ("True", "False"):
        raise ValueError(f"{name} must be True or False, not {value!r}")
    return value == "True"


def envint(name: str, default: str) -> int:
    return int(os.environ.get(name, default))


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

# Everything the app writes (SQLite file, local broker, uploads, reports) lives under one folder;
# a test run (pytest sets PYTEST_VERSION) gets its own, so it never mixes with the demo's data.
VAR_DIR = Path(envstr("PHASEWRIGHT_VAR_DIR", str(BASE_DIR / ("var/test" if os.environ.get("PYTEST_VERSION") else "var"))))
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
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
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
STATIC_ROOT.mkdir(exist_ok=True)
STORAGES = {
    "default": {"BACKEND": "django.core.files.storage.FileSystemStorage",
                "OPTIONS": {"location": str(VAR_DIR / "private")}},
    "staticfiles": {"BACKEND": "whitenoise.storage.CompressedStaticFilesStorage" if not DEBUG
                    else "django.contrib.staticfiles.storage.StaticFilesStorage"},
}
WHITENOISE_USE_FINDERS = DEBUG

# Uploads: Django caps the non-file body; the file cap is ours (the proxy caps both in production).
PHASEWRIGHT_MAX_UPLOAD_BYTES = envint("PHASEWRIGHT_MAX_UPLOAD_BYTES", str(200 * 2**20))
PHASEWRIGHT_MAX_TRIANGLES = envint("PHASEWRIGHT_MAX_TRIANGLES", "5000000")
PHASEWRIGHT_MAX_EXTENT_MM = envint("PHASEWRIGHT_MAX_EXTENT_MM", "2000")
PHASEWRIGHT_MAX_ACTIVE_CHECKS = envint("PHASEWRIGHT_MAX_ACTIVE_CHECKS", "20")
DATA_UPLOAD_MAX_NUMBER_FILES = 100
FILE_UPLOAD_MAX_MEMORY_SIZE = 5 * 2**20

# Celery: a real worker process in every setting; Redis when REDIS_URL is set, else a folder broker.
REDIS_URL = envstr("REDIS_URL", "")
CELERY_BROKER_URL = REDIS_URL or "filesystem://"
BROKER_DIR = VAR_DIR / "broker"
FOLDER_BROKER_OPTIONS = {
    "data_folder_in": str(BROKER_DIR / "queue"), "data_folder_out": str(BROKER_DIR / "queue"),
    "control_folder": str(BROKER_DIR / "control"), "processed_folder": str(BROKER_DIR / "processed"),
    "store_processed": False}
# Redis redelivers a message not acked within the visibility timeout: it must exceed the hard time limit.
CELERY_BROKER_TRANSPORT_OPTIONS = {"visibility_timeout": 3600} if REDIS_URL else FOLDER_BROKER_OPTIONS
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_TASK_SOFT_TIME_LIMIT = envint("PHASEWRIGHT_CHECK_SOFT_LIMIT_S", "600")
CELERY_TASK_TIME_LIMIT = envint("PHASEWRIGHT_CHECK_HARD_LIMIT_S", "660")
CELERY_WORKER_MAX_TASKS_PER_CHILD = 50
CELERY_WORKER_MAX_MEMORY_PER_CHILD = envint("PHASEWRIGHT_WORKER_MAX_MEMORY_KIB", "3000000")
CELERY_TASK_IGNORE_RESULT = True
CELERY_BROKER_CONNECTION_RETRY_ON_STARTUP = True
PHASEWRIGHT_MAX_ATTEMPTS = 3

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": envstr("PHASEWRIGHT_LOG_LEVEL", "INFO")},
}
