"""Fixtures of the engine tests: one local Spark session for the whole test run.

The session runs in-process on two cores, bound to the loopback interface (no
network beyond 127.0.0.1), with the web UI off and few shuffle partitions so
small test tables stay fast; it is stopped when the run ends.
"""

from __future__ import annotations

import os
import sys

import pytest


@pytest.fixture(scope="session")
def spark():
    os.environ["SPARK_LOCAL_IP"] = "127.0.0.1"
    os.environ.setdefault("PYSPARK_PYTHON", sys.executable)
    from pyspark.sql import SparkSession

    session = (
        SparkSession.builder.master("local[2]")
        .appName("nbeda-tests")
        .config("spark.driver.host", "127.0.0.1")
        .config("spark.driver.bindAddress", "127.0.0.1")
        .config("spark.ui.enabled", "false")
        .config("spark.ui.showConsoleProgress", "false")
        .config("spark.sql.shuffle.partitions", "2")
        .config("spark.default.parallelism", "2")
        .config("spark.driver.memory", "1g")
        .config("spark.sql.execution.arrow.pyspark.enabled", "true")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()
