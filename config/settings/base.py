"""Settings shared by every environment. Everything that differs between machines comes from
the environment (12-factor); with no variables set this is the embedded default: an SQLite file
under ``var/`` and background jobs run in-process."""

from __future__ import annotations

import os
from pathlib import Path

from celery.schedules import crontab
from kombu import Queue

from config.database import databases
from config.logs import logging_config

BASE_DIR = Path(__file__).resolve().parent.parent.parent
VAR_DIR = Path(os.environ.get("LOOPKEEP_VAR_DIR", BASE_DIR / "var"))


def env_bool(name: str, default: bool = False) -> bool:
    value = os.environ.get(name)
    if value is None:
        return default
    return value.strip().lower() in {"1", "true", "yes", "on"}


def env_list(name: str, default: str = "") -> list[str]:
    return [item.strip() for item in os.environ.get(name, default).split(",") if item.strip()]


DEBUG = env_bool("DEBUG", False)
SECRET_KEY = os.environ.get("SECRET_KEY", "")
ALLOWED_HOSTS = env_list("ALLOWED_HOSTS", "127.0.0.1,localhost")

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "rest_framework",
    "rest_framework.authtoken",
    "django_filters",
    "drf_spectacular",
    "drf_spectacular_sidecar",
    "simple_history",
    "axes",
    "inventory",
    "analysis",
    "api",
    "pages",
]

MIDDLEWARE = [
    # First: the request id, log context and replica reads cover everything after it.
    "config.middleware.RequestContextMiddleware",
    "django.middleware.security.SecurityMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    "simple_history.middleware.HistoryRequestMiddleware",
    # Last, as django-axes asks: it answers a locked-out login.
    "axes.middleware.AxesMiddleware",
]

# Logins: django-axes first (it counts failures and locks a username from an address out after
# AXES_FAILURE_LIMIT of them, for AXES_COOLOFF_TIME hours), then Django's password check, which
# refuses the demo account unless DEBUG is on (config.accounts).
AUTHENTICATION_BACKENDS = [
    "axes.backends.AxesStandaloneBackend",
    "config.accounts.DemoAwareBackend",
]
AXES_FAILURE_LIMIT = int(os.environ.get("LOGIN_FAILURE_LIMIT", "5"))
AXES_COOLOFF_TIME = float(os.environ.get("LOGIN_LOCKOUT_HOURS", "0.25"))
AXES_LOCKOUT_PARAMETERS = [["username", "ip_address"]]
AXES_RESET_ON_SUCCESS = True
AXES_VERBOSE = False  # no banner on every start (it would mix into the commands' output)

ROOT_URLCONF = "config.urls"
WSGI_APPLICATION = "config.wsgi.application"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
                "pages.access.roles",
            ],
        },
    },
]

# The primary (DATABASE_URL), its pooling (DATABASE_POOL: none, native or pgbouncer) and an
# optional read replica (DATABASE_REPLICA_URL): see config/database.py and deploy/README.md.
DATABASES = databases(os.environ, sqlite_default=f"sqlite:///{VAR_DIR / 'loopkeep.sqlite3'}")
if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
    VAR_DIR.mkdir(parents=True, exist_ok=True)
# With a replica configured, the API's reads go there and a request that writes reads from the
# primary afterwards (config/routers.py); LOOPKEEP_REPLICA_READS=0 keeps every read on the primary.
LOOPKEEP_REPLICA_READS = "replica" in DATABASES and env_bool("LOOPKEEP_REPLICA_READS", True)
DATABASE_ROUTERS = ["config.routers.PrimaryReplicaRouter"]

DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.UserAttributeSimilarityValidator"},
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
    {"NAME": "django.contrib.auth.password_validation.NumericPasswordValidator"},
]

LANGUAGE_CODE = "en-us"
TIME_ZONE = "UTC"
USE_I18N = True
USE_TZ = True

# The planner pages' login (the admin keeps its own); anonymous visitors see only this page.
LOGIN_URL = "pages:login"
LOGIN_REDIRECT_URL = "pages:home"
LOGOUT_REDIRECT_URL = "pages:login"

STATIC_URL = "static/"
STATIC_ROOT = VAR_DIR / "static"

REST_FRAMEWORK = {
    "DEFAULT_SCHEMA_CLASS": "drf_spectacular.openapi.AutoSchema",
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "rest_framework.authentication.TokenAuthentication",
        "rest_framework.authentication.SessionAuthentication",
    ],
    # No endpoint falls back to AllowAny: every view needs a signed-in user with a role.
    "DEFAULT_PERMISSION_CLASSES": ["api.permissions.RolePermission"],
    "DEFAULT_FILTER_BACKENDS": ["django_filters.rest_framework.DjangoFilterBackend"],
    "DEFAULT_PAGINATION_CLASS": "api.pagination.CodePagination",
    "PAGE_SIZE": 50,
    "EXCEPTION_HANDLER": "api.errors.exception_handler",
    # JSON only, size-limited (413); another content type is a 415. A view that takes uploads
    # names its own parsers.
    "DEFAULT_PARSER_CLASSES": ["api.parsers.LimitedJSONParser"],
    "DEFAULT_THROTTLE_CLASSES": ["rest_framework.throttling.UserRateThrottle"],
    "DEFAULT_THROTTLE_RATES": {"user": os.environ.get("API_USER_RATE", "6000/min")},
}

SPECTACULAR_SETTINGS = {
    "TITLE": "Loopkeep API",
    "DESCRIPTION": (
        "CT secondary circuits, burdens, ratings and isolation-procedure checks. Every "
        "procedure verdict and isolation plan is an aid to planning, not a switching order: "
        "verify field conditions; local codes, the utility's own switching, lockout and tagging "
        "rules, and licensed, qualified practice take precedence."
    ),
    "VERSION": "1",
    "SERVE_INCLUDE_SCHEMA": False,
    "SERVE_PERMISSIONS": ["api.permissions.RolePermission"],
    "SWAGGER_UI_DIST": "SIDECAR",
    "SWAGGER_UI_FAVICON_HREF": "SIDECAR",
    "REDOC_DIST": "SIDECAR",
    "COMPONENT_SPLIT_REQUEST": True,
    # 1 A / 5 A: CT secondaries and device inputs share one enum.
    "ENUM_NAME_OVERRIDES": {"RatedAmperesEnum": [(1, 1), (5, 5)]},
    "POSTPROCESSING_HOOKS": [
        "drf_spectacular.hooks.postprocess_schema_enums",
        "api.schema.add_error_responses",
        "api.schema.add_record_links",
    ],
}

# Django's cache: the per-user throttle counts and the record-at-a-revision answers the API
# keeps (site documents, procedure verdicts). Redis (``CACHE_URL=redis://host:6379/N``) shares
# them between the server's processes; unset, each process keeps its own.
CACHES = {
    "default": (
        {
            "BACKEND": "django.core.cache.backends.redis.RedisCache",
            "LOCATION": os.environ["CACHE_URL"],
        }
        if os.environ.get("CACHE_URL")
        else {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}
    )
}

# Largest request body the API reads (a site file of a large substation is a few MB).
DATA_UPLOAD_MAX_MEMORY_SIZE = int(os.environ.get("API_MAX_BODY_BYTES", str(20 * 1024 * 1024)))

# Largest site file read by import_site, the commands' --file and the API's sites/import: a few
# MB above the largest real site (a generated 329-CT site is 0.6 MB as indented JSON).
SITE_FILE_MAX_BYTES = int(os.environ.get("LOOPKEEP_SITE_FILE_MAX_BYTES", str(4 * 1024 * 1024)))
# Errors a command prints for one site file at most (then the count of the rest).
SITE_FILE_MAX_ERRORS_SHOWN = int(os.environ.get("LOOPKEEP_SITE_FILE_MAX_ERRORS_SHOWN", "100"))

# Background jobs. No broker configured means the embedded default: run tasks in-process.
CELERY_BROKER_URL = os.environ.get("CELERY_BROKER_URL", "")
CELERY_TASK_ALWAYS_EAGER = not CELERY_BROKER_URL
CELERY_TASK_EAGER_PROPAGATES = True
# A task is acknowledged when it ends, one message at a time per worker process, and requeued
# if its process dies: every task is idempotent, so a redelivery only repeats work.
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_TASK_TIME_LIMIT = 30 * 60
CELERY_TASK_SOFT_TIME_LIMIT = 25 * 60
CELERY_RESULT_BACKEND = os.environ.get("CELERY_RESULT_BACKEND") or None
CELERY_TASK_IGNORE_RESULT = not CELERY_RESULT_BACKEND
CELERY_BROKER_CONNECTION_RETRY_ON_STARTUP = True
# A worker cut off from the broker keeps trying to reconnect (never gives up during a long
# outage) and lets its running task finish: with Redis the acknowledgement is a key deletion
# that works on the new connection, so the task is not run twice.
CELERY_BROKER_CONNECTION_MAX_RETRIES = None
CELERY_WORKER_CANCEL_LONG_RUNNING_TASKS_ON_CONNECTION_LOSS = False
CELERY_BROKER_CONNECTION_TIMEOUT = 4
# A message a worker took and never acknowledged (the worker was killed) comes back from Redis
# after the visibility timeout. It must exceed the longest task, or a task still running is
# delivered a second time: 35 minutes, above the 30-minute hard time limit. Lost recompute
# chunks do not wait for it: their heartbeat stops and the stall sweep sends them again within
# about a minute (LOOPKEEP_CHUNK_STALL_S); the original message, when it comes back, finds the
# chunk done and does nothing.
CELERY_BROKER_TRANSPORT_OPTIONS: dict[str, object] = {"visibility_timeout": 35 * 60}
# A send during a broker outage gives up after about a second: the outbox row stays pending and
# the sweep sends it again, so the edit that asked for it is not held up.
CELERY_TASK_PUBLISH_RETRY_POLICY = {
    "max_retries": 2,
    "interval_start": 0,
    "interval_step": 0.5,
    "interval_max": 0.5,
}
CELERY_WORKER_MAX_MEMORY_PER_CHILD = int(os.environ.get("CELERY_WORKER_MAX_MEMORY_KB", "1000000"))
# Queues per kind of work, each with its own workers (deploy/systemd/loopkeep-worker@.service),
# so neither a large import nor the nightly fleet run holds up the recompute of an edit:
# "recompute" (a run per edit, the planning of larger runs, the sweeps), "fleet" (the chunks of
# fleet and multi-site runs), "imports" (inventory tasks: site files and sheets) and "default"
# (housekeeping). The recompute worker serves edits only, so an edit waits for no chunk
# (measured: README "Deployment"); fleet workers also take "recompute", where an edit's run
# (priority 0 on Redis) is served before queued chunks (priority 6). A worker started without -Q
# consumes every queue.
CELERY_TASK_DEFAULT_QUEUE = "default"
CELERY_TASK_QUEUES = (Queue("default"), Queue("recompute"), Queue("fleet"), Queue("imports"))
CHUNK_PRIORITY = 6
CELERY_TASK_ROUTES = {
    "analysis.recompute_chunk": {"queue": "fleet", "priority": CHUNK_PRIORITY},
    "analysis.prune_results": {"queue": "default"},
    "analysis.*": {"queue": "recompute"},
    # The sweep of import jobs runs where the recompute sweeps do: not behind a long import on
    # the imports queue, nor waiting for a dead imports worker to come back.
    "inventory.sweep_import_jobs": {"queue": "recompute"},
    "inventory.prune_import_jobs": {"queue": "default"},
    "inventory.*": {"queue": "imports"},
}
# Several installations (or a test run beside a live one) may share one Redis: a prefix keeps
# their queues apart.
if os.environ.get("CELERY_BROKER_KEY_PREFIX"):
    CELERY_BROKER_TRANSPORT_OPTIONS["global_keyprefix"] = os.environ["CELERY_BROKER_KEY_PREFIX"]
CELERY_BROKER_TRANSPORT_OPTIONS["queue_order_strategy"] = "priority"
CELERY_BROKER_TRANSPORT_OPTIONS["priority_steps"] = [0, 3, CHUNK_PRIORITY, 9]
# Recompute reliability (analysis.services.liveness and .outbox): a running chunk stamps a
# heartbeat every LOOPKEEP_CHUNK_HEARTBEAT_S; the sweep, every LOOPKEEP_SWEEP_EVERY_S, sends
# again a chunk silent for LOOPKEEP_CHUNK_STALL_S (its worker died), an outbox row never sent
# after LOOPKEEP_OUTBOX_SEND_AFTER_S (the broker was away at commit), and runs or rows sent
# but never started after LOOPKEEP_RUN_LOST_S (a message lost; a busy queue looks the same, so
# this one waits long). The sweep's message expires after one interval: while workers are away
# the sweeps do not pile up in the queue.
LOOPKEEP_CHUNK_HEARTBEAT_S = float(os.environ.get("LOOPKEEP_CHUNK_HEARTBEAT_S", "5"))
LOOPKEEP_CHUNK_STALL_S = float(os.environ.get("LOOPKEEP_CHUNK_STALL_S", "45"))
LOOPKEEP_OUTBOX_SEND_AFTER_S = float(os.environ.get("LOOPKEEP_OUTBOX_SEND_AFTER_S", "5"))
LOOPKEEP_RUN_LOST_S = float(os.environ.get("LOOPKEEP_RUN_LOST_S", "600"))
LOOPKEEP_SWEEP_EVERY_S = float(os.environ.get("LOOPKEEP_SWEEP_EVERY_S", "10"))
# Import jobs (inventory.imports): a running job stamps a heartbeat every
# LOOPKEEP_CHUNK_HEARTBEAT_S; the sweep, every LOOPKEEP_IMPORT_SWEEP_EVERY_S, marks failed a job
# silent for LOOPKEEP_IMPORT_STALL_S (its worker died; the import had not committed).
LOOPKEEP_IMPORT_STALL_S = float(os.environ.get("LOOPKEEP_IMPORT_STALL_S", "60"))
LOOPKEEP_IMPORT_SWEEP_EVERY_S = float(os.environ.get("LOOPKEEP_IMPORT_SWEEP_EVERY_S", "30"))
# The same sweep sends again a job still queued LOOPKEEP_IMPORT_LOST_S after it was last sent (its
# message was lost; a long queue looks the same, and a second message is harmless).
LOOPKEEP_IMPORT_LOST_S = float(os.environ.get("LOOPKEEP_IMPORT_LOST_S", str(LOOPKEEP_RUN_LOST_S)))
CELERY_BEAT_SCHEDULE = {
    "send-pending-recompute-requests": {
        "task": "analysis.sweep_requests",
        "schedule": LOOPKEEP_SWEEP_EVERY_S,
        "options": {"expires": LOOPKEEP_SWEEP_EVERY_S},
    },
    "recompute-fleet-nightly": {
        "task": "analysis.recompute_fleet",
        "schedule": crontab(hour=2, minute=15),
    },
    "prune-results-daily": {
        "task": "analysis.prune_results",
        "schedule": crontab(hour=3, minute=40),
    },
    "sweep-import-jobs": {
        "task": "inventory.sweep_import_jobs",
        "schedule": LOOPKEEP_IMPORT_SWEEP_EVERY_S,
        "options": {"expires": LOOPKEEP_IMPORT_SWEEP_EVERY_S},
    },
    "prune-import-jobs-daily": {
        "task": "inventory.prune_import_jobs",
        "schedule": crontab(hour=3, minute=50),
    },
}
# Beat writes a heartbeat for /ready/ from its own loop (config.beat), which passes at least
# this often (seconds) whatever the schedule.
CELERY_BEAT_SCHEDULER = "config.beat:HeartbeatScheduler"
CELERY_BEAT_MAX_LOOP_INTERVAL = 15
# prune_results: finished runs (and their chunks) and done outbox rows older than this go.
LOOPKEEP_PRUNE_KEEP_DAYS = int(os.environ.get("LOOPKEEP_PRUNE_KEEP_DAYS", "30"))
# prune_import_jobs: finished import jobs (their results and errors) older than this go.
LOOPKEEP_IMPORT_KEEP_DAYS = int(
    os.environ.get("LOOPKEEP_IMPORT_KEEP_DAYS", str(LOOPKEEP_PRUNE_KEEP_DAYS))
)
# /ready/: a worker of each of these queues must have sent a heartbeat within
# READY_WORKER_HEARTBEAT_S, and no recompute request may be pending longer than
# READY_MAX_PENDING_AGE_S (the sweep sends lost ones again after a minute).
READY_QUEUES = env_list("READY_QUEUES", "recompute,fleet,imports")
READY_WORKER_HEARTBEAT_S = float(os.environ.get("READY_WORKER_HEARTBEAT_S", "30"))
READY_MAX_PENDING_AGE_S = float(os.environ.get("READY_MAX_PENDING_AGE_S", "600"))
# /ready/: beat must have written its heartbeat within this (it writes every 5-15 s).
READY_BEAT_HEARTBEAT_S = float(os.environ.get("READY_BEAT_HEARTBEAT_S", "60"))
# One BLAS/OpenMP thread per process: the engine solves many small systems, and with a pool of
# worker processes per core, library threads only fight over the cores (measured: 2 workers on
# 2 cores computed 1.7x slower with the default threads). Must be set before numpy loads.
for _threads_var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_threads_var, "1")
# A fleet chunk (one task) takes sites in order while it holds at most CHUNK_CTS CTs (a larger
# site goes alone) and CHUNK_SITES sites: its memory follows its CTs, not its sites.
LOOPKEEP_RECOMPUTE_CHUNK_SITES = int(os.environ.get("LOOPKEEP_RECOMPUTE_CHUNK_SITES", "40"))
LOOPKEEP_RECOMPUTE_CHUNK_CTS = int(os.environ.get("LOOPKEEP_RECOMPUTE_CHUNK_CTS", "4000"))

# Logs on standard error: LOG_FORMAT=json writes one JSON object per line with the request id,
# user, site, task and run id of the line (config/logs.py); text (default) a readable line.
LOG_FORMAT = os.environ.get("LOG_FORMAT", "text").strip().lower()
LOGGING = logging_config(fmt=LOG_FORMAT, level=os.environ.get("LOG_LEVEL", "INFO"))
if CELERY_TASK_ALWAYS_EAGER:
    # In-process jobs run inside the command (or request) that asked for them: Celery's line
    # per task ("Task ... succeeded in ...") and kombu's note that no broker host was given
    # would be printed among the command's own output. Only their errors are logged; the run
    # rows keep status, counts and timings. Workers (with a broker) keep Celery's logging.
    LOGGING["loggers"] = {"celery": {"level": "ERROR"}, "kombu": {"level": "ERROR"}}
