"""Fixtures shared by the warehouse tests: one throw-away PostgreSQL server and one Spark session per run.

Each skips the tests that use it, with the reason, when its server cannot
start here; under CI (`CI=true`) they fail instead (tests/serverkit.py).
"""

from __future__ import annotations

import pytest

import serverkit


@pytest.fixture(scope="session")
def postgres():
    try:
        server = serverkit.start_postgres()
    except RuntimeError as error:
        serverkit.unavailable(str(error))
    try:
        yield server
    finally:
        server.stop()


@pytest.fixture(scope="session")
def spark():
    try:
        session = serverkit.spark_session()
    except RuntimeError as error:
        serverkit.unavailable(str(error))
    try:
        yield session
    finally:
        serverkit.stop_spark()
