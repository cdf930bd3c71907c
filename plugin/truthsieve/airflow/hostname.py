"""A per-worker host name for ``[core] hostname_callable``.

Task instances record ``get_hostname()`` of the worker that ran them. Workers in separate
containers or machines differ already; several workers on one machine (the live Celery
test) all report the machine's name. Set ``TRUTHSIEVE_WORKER_NAME`` per worker and
``AIRFLOW__CORE__HOSTNAME_CALLABLE=truthsieve.airflow.hostname.worker_name`` to tell them apart.
"""

from __future__ import annotations

import os
import socket

WORKER_NAME_VARIABLE = "TRUTHSIEVE_WORKER_NAME"


def worker_name() -> str:
    """``TRUTHSIEVE_WORKER_NAME`` when set and not blank, else the machine's FQDN (Airflow's default)."""
    return os.environ.get(WORKER_NAME_VARIABLE, "").strip() or socket.getfqdn()
