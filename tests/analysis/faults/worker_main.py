"""Runs a Celery worker of the app for the fault tests, as ``python -m
tests.analysis.faults.worker_main [celery worker options]``. With ``FAULTS_SLOW_SITE_S`` set,
the engine takes that many seconds more per site, so a chunk runs long enough to be killed in
the middle."""

from __future__ import annotations

import os
import sys
import time

import django


def main() -> None:
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings.test")
    django.setup()
    slow = float(os.environ.get("FAULTS_SLOW_SITE_S", "0"))
    if slow:
        from analysis import compute

        real = compute.compute_sites

        def slow_compute(records):  # type: ignore[no-untyped-def]
            results = real(records)
            time.sleep(slow * len(records))
            return results

        compute.compute_sites = slow_compute  # type: ignore[assignment]
    from config.celery import app

    app.worker_main(["worker", *sys.argv[1:]])


if __name__ == "__main__":
    main()
