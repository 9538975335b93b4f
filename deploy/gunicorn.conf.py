"""gunicorn settings for the API (``gunicorn -c deploy/gunicorn.conf.py config.wsgi``)."""

import multiprocessing
import os

bind = os.environ.get("LOOPKEEP_BIND", "127.0.0.1:8000")
workers = int(os.environ.get("GUNICORN_WORKERS", multiprocessing.cpu_count() * 2 + 1))
threads = int(os.environ.get("GUNICORN_THREADS", "2"))
worker_class = "gthread"
timeout = 60
graceful_timeout = 30
keepalive = 5
max_requests = 5000
max_requests_jitter = 500
accesslog = "-"
errorlog = "-"
