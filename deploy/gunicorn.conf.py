"""gunicorn settings for the API (``gunicorn -c deploy/gunicorn.conf.py config.wsgi``).

Every value can be overridden from the environment (deploy/loopkeep.env.example explains each).
Threads (``gthread``) suit this service: a request mostly waits on PostgreSQL, and the CPU-heavy
recomputes run on the Celery workers, not here.
"""

import multiprocessing
import os

bind = os.environ.get("LOOPKEEP_BIND", "127.0.0.1:8000")
# Workers from cores: (2 x cores) + 1, gunicorn's documented starting point; each holds
# GUNICORN_THREADS request threads, so one machine serves workers x threads requests at once.
workers = int(os.environ.get("GUNICORN_WORKERS", multiprocessing.cpu_count() * 2 + 1))
threads = int(os.environ.get("GUNICORN_THREADS", "2"))
worker_class = "gthread"
# A request taking longer than this is killed and logged (the largest site import takes a few
# seconds; reports are stored, not computed per request).
timeout = int(os.environ.get("GUNICORN_TIMEOUT", "60"))
graceful_timeout = 30
keepalive = 5
# Replace a worker after this many requests (bounded memory growth), spread so they do not all
# restart at once.
max_requests = 5000
max_requests_jitter = 500
# No preload: each worker opens its own database connections (and its own pool with
# DATABASE_POOL=native) after the fork; a pool's threads do not survive a fork.
preload_app = False
# nginx on the same host sets X-Forwarded-Proto; trust it only from there.
forwarded_allow_ips = os.environ.get("GUNICORN_FORWARDED_ALLOW_IPS", "127.0.0.1")
# Heartbeat files in memory, not on a disk that may stall.
worker_tmp_dir = "/dev/shm" if os.path.isdir("/dev/shm") else None
# Access log on standard output (journald under systemd), with the request id the app echoes
# and the time taken (microseconds); "" turns it off (the app's own JSON access line remains).
accesslog = os.environ.get("GUNICORN_ACCESS_LOG", "-") or None
access_log_format = '%(h)s "%(r)s" %(s)s %(B)s %(D)sus rid=%({x-request-id}o)s ua="%(a)s"'
errorlog = "-"
loglevel = os.environ.get("LOG_LEVEL", "info").lower()
