"""Scratch PostgreSQL databases for the benchmark scripts that need real row locks.

Each script names its own database (``register_load``, ``register_bench``); only
that database is ever dropped or created.
"""

from __future__ import annotations

import os
import sys


def admin_url(why: str = "") -> str:
    """The server to create scratch databases on, from ``DATABASE_URL`` (PostgreSQL only)."""
    url = os.environ.get("DATABASE_URL", "postgres://postgres@127.0.0.1:5432/postgres")
    if not url.startswith("postgres"):
        sys.exit("DATABASE_URL must point at PostgreSQL" + (f" ({why})" if why else ""))
    return url


def recreate(admin: str, name: str) -> str:
    """Drop and create the database ``name``; return its URL."""
    import psycopg

    with psycopg.connect(admin, autocommit=True) as conn:
        conn.execute(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")
        conn.execute(f"CREATE DATABASE {name}")
    return admin.rsplit("/", 1)[0] + f"/{name}"


def drop(admin: str, name: str) -> None:
    import psycopg

    with psycopg.connect(admin, autocommit=True) as conn:
        conn.execute(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")
