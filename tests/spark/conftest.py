"""One local Spark session for every Spark test: local[2], two shuffle partitions, no UI.

Starting Spark costs seconds, so the whole suite shares one session. Spark
needs Java 17 or newer: `make test` installs it (scripts/system-tools.sh);
without it these tests fail and say so, they never skip.
"""

from __future__ import annotations

import os
import shutil
import sys

import pytest


@pytest.fixture(scope="session")
def spark(tmp_path_factory):
    if shutil.which("java") is None:
        pytest.fail("the Spark tests need Java 17 or newer: run `make test`, which installs it "
                    "(bash scripts/system-tools.sh java)", pytrace=False)
    from pyspark.sql import SparkSession

    os.environ["PYSPARK_PYTHON"] = sys.executable  # the Python workers import this venv's sortition

    session = (SparkSession.builder.master("local[2]").appName("sortition-tests")
               .config("spark.ui.enabled", "false")
               .config("spark.sql.shuffle.partitions", "2")
               .config("spark.default.parallelism", "2")
               .config("spark.driver.memory", "1g")
               .config("spark.ui.showConsoleProgress", "false")
               .config("spark.sql.warehouse.dir", str(tmp_path_factory.mktemp("spark-warehouse")))
               .getOrCreate())
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()
