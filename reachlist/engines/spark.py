"""Apache Spark through pyspark: histories kept in a data lake or a cluster.

``spark://local[N]`` runs Spark in this process's JVM on N cores (what the tests use);
``spark://HOST:PORT`` joins a standalone cluster; ``sc://HOST:PORT`` speaks Spark Connect. Tables
come from the session's catalogue, or from Parquet files named in the mapping (``path`` per table
or ``lake`` for a folder), read as temporary views. The session runs in UTC with ANSI SQL and
double-quoted identifiers, so reachlist's templates run unchanged; results come back to the driver
as Arrow. Spark has no transactions: the campaign log lives in a local ``--state`` file.
"""

from __future__ import annotations

import contextlib
import logging
import os
import warnings
from typing import Any

import polars as pl

from reachlist import statements
from reachlist.engines.base import Engine
from reachlist.errors import InputError, WarehouseError
from reachlist.query import Dialect
from reachlist.schema import Mapping
from reachlist.wording import option

SPARK = Dialect(
    "spark",
    placeholder="colon",
    text_type="STRING",
    type_names=(("DOUBLE PRECISION", "DOUBLE"),),
    day_difference="datediff({end}, {start})",  # a date minus a date is an interval in Spark
    pair_key="xxhash64({a}, {b})",
)

SESSION_SETTINGS = {
    "spark.sql.session.timeZone": "UTC",  # timestamps compare as the other engines do
    "spark.sql.ansi.enabled": "true",
    "spark.sql.ansi.doubleQuotedIdentifiers": "true",  # "name" is an identifier, as elsewhere
    "spark.ui.enabled": "false",
    "spark.ui.showConsoleProgress": "false",
    "spark.sql.shuffle.partitions": os.environ.get("REACHLIST_SPARK_PARTITIONS", "8"),
    "spark.driver.memory": os.environ.get("REACHLIST_SPARK_MEMORY", "2g"),
}
"""Settings every session gets (the partitions and the driver's memory can be overridden with
REACHLIST_SPARK_PARTITIONS and REACHLIST_SPARK_MEMORY)."""


class SparkEngine(Engine):
    dialect = SPARK
    transactional = False
    batches_joins = False  # one counting query: each one rescans the kept pairs (measured 15 s)

    def __init__(self, target: str, mapping: Mapping) -> None:
        self.display_name = target
        try:
            from pyspark.sql import SparkSession
        except ImportError:
            raise InputError(
                f"Expected pyspark to run on {target}, found it is not installed.",
                hint="pip install 'reachlist[spark]' (Spark needs Java 17 or later)",
            ) from None
        # pyspark's note on pandas versions: reachlist hands no pandas data to Spark
        warnings.filterwarnings("ignore", "PySpark does not yet fully support", FutureWarning)
        # On a cluster mining counts where the data is and only counts come back; in local mode
        # the driver is the same machine and counting the pairs in memory measured faster
        # (bench/spark_mining.py: 6x), so the pairs come to the driver there.
        self.counts_in_engine = not target.removeprefix("spark://").startswith("local")
        builder: Any = SparkSession.builder.appName("reachlist")
        if target.startswith("sc://"):
            builder = builder.remote(target)
        else:
            master = target.removeprefix("spark://")
            builder = builder.master(master if master.startswith("local") else target)
        for key, value in SESSION_SETTINGS.items():
            # a Spark Connect server owns its JVM: only the session's SQL settings are ours
            if target.startswith("sc://") and not key.startswith("spark.sql."):
                continue
            builder = builder.config(key, value)
        try:
            self.spark = builder.getOrCreate()
        except Exception as exc:
            raise WarehouseError(
                f"Cannot start a Spark session on {target}: {first_line(exc)}.",
                hint="check that Java 17+ is installed (java -version) and the master URL, "
                "for example spark://local[2]",
            ) from None
        for key in ("spark.sql.session.timeZone", "spark.sql.ansi.doubleQuotedIdentifiers"):
            self.spark.conf.set(key, SESSION_SETTINGS[key])  # an existing session keeps its own
        with contextlib.suppress(Exception):
            self.spark.sparkContext.setLogLevel("OFF")  # a failed query is reported as one line
        logging.getLogger("SQLQueryContextLogger").setLevel(logging.CRITICAL)
        self.mapping = self._read_paths(mapping)

    def _read_paths(self, mapping: Mapping) -> Mapping:
        """Tables the mapping names by path become temporary views of the session."""
        for name, tmap in mapping.tables.items():
            if tmap.path is None:
                continue
            try:
                frame = self.spark.read.parquet(tmap.path)
            except Exception as exc:
                found = first_line(exc)
                hint = f"fix path under [{name}] in the mapping (a Parquet file or folder)"
                if "NANOS" in found:  # pandas writes nanosecond timestamps; Spark reads none
                    hint = (
                        "Spark reads no nanosecond timestamps: rewrite the file with microsecond "
                        "ones (polars: .dt.cast_time_unit('us'); pyarrow: coerce_timestamps='us')"
                    )
                raise InputError(
                    f"Expected Parquet data for {name} at {tmap.path!r}, found {found}.",
                    hint=hint,
                ) from None
            frame.createOrReplaceTempView(tmap.physical[-1])
        return mapping

    def fetch(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        table = self.spark.sql(sql, args=params or None).toArrow()
        frame = pl.from_arrow(table)
        assert isinstance(frame, pl.DataFrame)
        return naive_utc(frame)

    def execute(self, sql: str, params: dict[str, Any]) -> None:
        self.spark.sql(sql, args=params or None).collect()

    def executemany(self, sql: str, rows: list[dict[str, Any]]) -> None:
        for row in rows:
            self.execute(sql, row)

    def run(self, statement: str) -> None:
        self.spark.sql(statement).collect()

    def register_frame(self, name: str, frame: pl.DataFrame) -> None:
        self.spark.createDataFrame(frame.to_arrow()).createOrReplaceTempView(name)

    def unregister_frame(self, name: str) -> None:
        with contextlib.suppress(Exception):
            self.spark.catalog.dropTempView(name)

    def keep_rows(self, name: str, sql: str, params: dict[str, Any]) -> None:
        frame = self.spark.sql(sql, args=params or None).cache()
        frame.count()  # computed once now, read from the cluster's memory afterwards
        frame.createOrReplaceTempView(name)

    def forget_rows(self, name: str) -> None:
        with contextlib.suppress(Exception):
            self.spark.table(name).unpersist()
        with contextlib.suppress(Exception):
            self.spark.catalog.dropTempView(name)

    def append_frame(
        self, physical: tuple[str, ...], columns: list[str], frame: pl.DataFrame
    ) -> None:
        self.unsupported(f"writing tables (keep the campaign log in a {option('state')} file)")

    def columns(self, parts: tuple[str, ...]) -> list[tuple[str, str]] | None:
        try:
            rows = self.spark.sql(statements.describe_table(parts)).collect()
        except Exception as exc:
            if "not found" in str(exc).lower() or "cannot be found" in str(exc).lower():
                return None
            raise
        out = []
        for row in rows:
            col, dtype = str(row[0]), str(row[1])
            if not col or col.startswith("#"):
                break  # partition and detail sections follow the columns
            out.append((col, dtype))
        return out or None

    def close(self) -> None:
        """The session stays for the next warehouse of this process (Spark starts slowly)."""


def naive_utc(frame: pl.DataFrame) -> pl.DataFrame:
    """Timestamps with a time zone (Spark's TIMESTAMP comes back in UTC) as naive UTC, as the
    other engines return them."""
    zoned = [
        name
        for name, dtype in frame.schema.items()
        if isinstance(dtype, pl.Datetime) and dtype.time_zone is not None
    ]
    if not zoned:
        return frame
    return frame.with_columns(
        pl.col(c).dt.convert_time_zone("UTC").dt.replace_time_zone(None) for c in zoned
    )


def first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0].rstrip(".") if text else type(exc).__name__
