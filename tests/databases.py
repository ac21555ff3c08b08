"""Test databases: one template built from the migrations once per run, one copy per process.

A run (plain `pytest`, or `pytest -n N` with pytest-xdist) shares a folder and a run id through
the environment, which the xdist workers inherit from the process that starts them. The first
process that needs a database builds the template under a file lock; each process then takes
its own copy, so tests in parallel processes never see each other's rows:

- SQLite: the template is a file; a copy is a file copy (under a millisecond, against about 4 s
  for the migrations).
- PostgreSQL (the base DATABASE_URL names a database the suite may create others beside): the
  template is a database `<base>_<run>_template`; a copy is `CREATE DATABASE ... TEMPLATE`
  (about 0.2 s against about 1 s for the migrations), with synchronous_commit off (a test
  database need not survive a crash) and a 30 s lock_timeout. Each process drops its copy at
  the end of its session, and the process that started the run drops the template."""

from __future__ import annotations

import fcntl
import os
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import sqlalchemy as sa

_RUN_DIR = "SEEPLINE_TEST_RUN_DIR"
_BASE_URL = "SEEPLINE_TEST_BASE_URL"


@dataclass(frozen=True)
class TestDatabases:
    """Where this run's template and this process's copy live."""

    run_dir: Path
    base_url: str
    worker: str
    starts_run: bool

    __test__ = False  # not a test class, whatever pytest's naming rule says

    @property
    def is_postgres(self) -> bool:
        return self.base_url.startswith("postgresql")

    @property
    def own_dir(self) -> Path:
        path = self.run_dir / self.worker
        path.mkdir(exist_ok=True)
        return path

    def _named(self, suffix: str) -> str:
        if self.is_postgres:
            base = sa.engine.make_url(self.base_url)
            name = f"{base.database}_{self.run_dir.name[-8:]}_{suffix}".lower()
            return base.set(database=name).render_as_string(hide_password=False)
        return f"sqlite:///{self.run_dir / f'{suffix}.db'}"

    @property
    def template_url(self) -> str:
        return self._named("template")

    @property
    def url(self) -> str:
        """This process's own database."""
        return self._named(self.worker)

    @contextmanager
    def _locked(self) -> Iterator[None]:
        with (self.run_dir / "template.lock").open("w") as lock:
            fcntl.flock(lock, fcntl.LOCK_EX)
            try:
                yield
            finally:
                fcntl.flock(lock, fcntl.LOCK_UN)

    def create_own(self) -> str:
        """Build the template if no process has yet, copy it for this process; its URL."""
        from service.db import migrate

        with self._locked():
            ready = self.run_dir / "template.ready"
            if not ready.exists():
                if self.is_postgres:
                    self._admin(
                        _drop(self.template_url), f"CREATE DATABASE {_name(self.template_url)}"
                    )
                migrate(self.template_url)
                ready.touch()
            if self.is_postgres:
                own = _name(self.url)
                self._admin(
                    _drop(self.url),
                    f"CREATE DATABASE {own} TEMPLATE {_name(self.template_url)}",
                    f"ALTER DATABASE {own} SET synchronous_commit = off",
                    # A request stuck behind a lock fails within 30 s instead of never (an
                    # event loop blocked on a lock never answers again: see the browser tests).
                    f"ALTER DATABASE {own} SET lock_timeout = '30s'",
                )
            else:
                shutil.copyfile(self.template_url.split("///", 1)[1], self.url.split("///", 1)[1])
        return self.url

    def drop_own(self) -> None:
        if self.is_postgres:
            self._admin(_drop(self.url))

    def finish_run(self) -> None:
        """Drop the template and the run's folder (by the process that started the run)."""
        if not self.starts_run:
            return
        if self.is_postgres and (self.run_dir / "template.ready").exists():
            self._admin(_drop(self.template_url))
        shutil.rmtree(self.run_dir, ignore_errors=True)

    def _admin(self, *statements: str) -> None:
        """Run statements outside a transaction on the base database's server."""
        engine = sa.create_engine(
            self.base_url, isolation_level="AUTOCOMMIT", poolclass=sa.pool.NullPool
        )
        try:
            with engine.connect() as connection:
                for statement in statements:
                    connection.exec_driver_sql(statement)
        finally:
            engine.dispose()


def _name(url: str) -> str:
    """The database's name, quoted for SQL."""
    return f'"{sa.engine.make_url(url).database}"'


def _drop(url: str) -> str:
    return f"DROP DATABASE IF EXISTS {_name(url)} WITH (FORCE)"


def for_this_process() -> TestDatabases:
    """The run's databases, as seen by this process; the first process of a run starts it."""
    starts_run = _RUN_DIR not in os.environ
    if starts_run:
        os.environ[_RUN_DIR] = tempfile.mkdtemp(prefix="seepline-tests-")
        default = f"sqlite:///{Path(os.environ[_RUN_DIR]) / 'unused.db'}"
        os.environ[_BASE_URL] = os.environ.get("DATABASE_URL") or default
    return TestDatabases(
        run_dir=Path(os.environ[_RUN_DIR]),
        base_url=os.environ[_BASE_URL],
        worker=os.environ.get("PYTEST_XDIST_WORKER", "main"),
        starts_run=starts_run,
    )
