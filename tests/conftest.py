"""Shared fixtures: a per-session dataset cache and the real ``foldsweep`` command in a subprocess."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path
from typing import Any, Callable

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="session", autouse=True)
def _session_cache(tmp_path_factory: pytest.TempPathFactory) -> Any:
    # a fresh dataset cache per session: no test reads what an earlier session (or a user) left behind
    patch = pytest.MonkeyPatch()
    patch.setenv("FOLDSWEEP_CACHE", str(tmp_path_factory.mktemp("foldsweep-cache")))
    yield
    patch.undo()


def subprocess_env(extra: dict[str, str] | None = None) -> dict[str, str]:
    """The environment for a ``foldsweep`` subprocess: this repo importable, quick progress lines."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), *filter(None, [env.get("PYTHONPATH")])])
    env.setdefault("FOLDSWEEP_PROGRESS_SECONDS", "0.5")
    env.update(extra or {})
    return env


def foldsweep_command(*args: str) -> list[str]:
    return [sys.executable, "-m", "sweep.cli", *map(str, args)]


def run_foldsweep(*args: Any, cwd: str | Path | None = None, env: dict[str, str] | None = None,
                  timeout: float = 180) -> subprocess.CompletedProcess[str]:
    """Run ``foldsweep ARGS`` to completion; stdout and stderr captured as text."""
    return subprocess.run(foldsweep_command(*args), cwd=cwd or ROOT, env=subprocess_env(env),
                          capture_output=True, text=True, timeout=timeout)


def start_foldsweep(*args: Any, cwd: str | Path | None = None,
                    env: dict[str, str] | None = None) -> subprocess.Popen[str]:
    """Start ``foldsweep ARGS`` in its own session (so that its process group can be signalled)."""
    return subprocess.Popen(foldsweep_command(*args), cwd=cwd or ROOT, env=subprocess_env(env),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)


@pytest.fixture
def foldsweep() -> Callable[..., subprocess.CompletedProcess[str]]:
    """``foldsweep(*args, cwd=..., env=...)`` -> CompletedProcess of the real command."""
    return run_foldsweep


# ---- PostgreSQL (the cluster issue's tests) ---------------------------------------------------

def _pg_admin_url() -> str | None:
    return os.environ.get("FOLDSWEEP_TEST_PG_URL") or None


def _pg_unavailable(reason: str) -> None:
    # in CI (.ci/run) the server must be there: a skip would hide the PostgreSQL tests
    if os.environ.get("FOLDSWEEP_REQUIRE_PG") == "1":
        pytest.fail(f"FOLDSWEEP_REQUIRE_PG=1 but {reason}", pytrace=False)
    pytest.skip(reason)


@pytest.fixture
def pg_url() -> Any:
    """The URL of a fresh, empty PostgreSQL database for this test (dropped afterwards).

    Made on the server named by ``FOLDSWEEP_TEST_PG_URL`` (through its ``postgres``
    database), so that tests never see each other's jobs. Skips when the variable is
    unset or the server unreachable; fails instead when ``FOLDSWEEP_REQUIRE_PG=1``.
    """
    import uuid

    url = _pg_admin_url()
    if url is None:
        _pg_unavailable("no PostgreSQL server: set FOLDSWEEP_TEST_PG_URL (bash .ci/postgres.sh starts one)")
    try:
        import sqlalchemy as sa

        base = sa.engine.make_url(url)
        admin = sa.create_engine(base.set(database="postgres"), isolation_level="AUTOCOMMIT")
        name = f"foldsweep_t_{uuid.uuid4().hex[:12]}"
        with admin.connect() as conn:
            conn.exec_driver_sql(f'CREATE DATABASE "{name}"')
    except Exception as exc:  # noqa: BLE001 - any failure to reach the server means "unavailable"
        _pg_unavailable(f"PostgreSQL at {url} is unreachable: {' '.join(str(exc).split())[:200]}")
    try:
        yield base.set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()
