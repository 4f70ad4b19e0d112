"""reachlist on Spark beyond local mode: a standalone cluster (``spark://HOST:PORT``: a master and
one worker started on this machine with pyspark's own launcher, ``bin/spark-class``; the sample is
read from Parquet by an executor on that worker) and a Spark Connect server (``sc://HOST:PORT``:
started with ``bin/spark-submit``). The rules equal DuckDB's.

Each command runs in its own process (a fresh JVM: the local-mode session of test_spark.py may
still live in this one). Each server takes under a minute to start and serve one command.
"""

from __future__ import annotations

import importlib.util
import json
import os
import shutil
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from reachlist.cli import main
from reachlist.sample import KEY_SKUS
from reachlist.schema import SOURCE_TABLES

pytestmark = [
    pytest.mark.skipif(
        importlib.util.find_spec("pyspark") is None,
        reason="needs pyspark (pip install -e '.[test]' or '.[spark]')",
    ),
    pytest.mark.skipif(shutil.which("java") is None, reason="Spark needs Java 17+ on the PATH"),
]

MAT = KEY_SKUS["heated_mat"]
START_SECONDS = 120  # the most a master or worker may take to come up


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _wait_for(log: Path, text: str, proc: subprocess.Popen[bytes]) -> bool:
    deadline = time.monotonic() + START_SECONDS
    while time.monotonic() < deadline:
        if log.exists() and text in log.read_text(errors="replace"):
            return True
        if proc.poll() is not None:
            return False
        time.sleep(0.5)
    return False


@pytest.fixture(scope="module")
def cluster(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    import pyspark

    home = Path(pyspark.__file__).parent
    folder = tmp_path_factory.mktemp("cluster")
    env = {**os.environ, "SPARK_HOME": str(home), "SPARK_WORKER_DIR": str(folder / "work")}
    port = _free_port()
    url = f"spark://127.0.0.1:{port}"
    spark_class = str(home / "bin" / "spark-class")
    started: list[subprocess.Popen[bytes]] = []

    def launch(args: list[str], log: Path) -> subprocess.Popen[bytes]:
        with log.open("wb") as out:
            proc = subprocess.Popen(
                [spark_class, *args], stdout=out, stderr=subprocess.STDOUT, env=env
            )
        started.append(proc)
        return proc

    try:
        master_log = folder / "master.log"
        master = launch(
            [
                "org.apache.spark.deploy.master.Master",
                "--host",
                "127.0.0.1",
                "--port",
                str(port),
                "--webui-port",
                str(_free_port()),
            ],
            master_log,
        )
        if not _wait_for(master_log, "New state: ALIVE", master):
            pytest.fail(f"the Spark master did not start: {master_log.read_text()[-1500:]}")
        worker_log = folder / "worker.log"
        worker = launch(
            [
                "org.apache.spark.deploy.worker.Worker",
                url,
                "--cores",
                "1",
                "--memory",
                "1g",
                "--webui-port",
                str(_free_port()),
                "--work-dir",
                str(folder / "work"),
            ],
            worker_log,
        )
        if not _wait_for(worker_log, "Successfully registered with master", worker):
            pytest.fail(f"the Spark worker did not register: {worker_log.read_text()[-1500:]}")
        yield url
    finally:
        for proc in started:
            proc.terminate()
        for proc in started:
            try:
                proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                proc.kill()


def _rules_equal_duckdb(url: str, pristine: Path, tmp_path: Path) -> None:
    # through a cluster mining counts in the engine (only counts reach the driver), on DuckDB
    # in memory: the same rules
    lake = tmp_path / "lake"
    lake.mkdir()
    with duckdb.connect(str(pristine), read_only=True) as con:
        for table in SOURCE_TABLES:
            con.execute(f"COPY {table} TO '{lake / table}.parquet' (FORMAT parquet)")
    mapping = tmp_path / "lake.toml"
    mapping.write_text(f'lake = "{lake}"\n')
    ran = subprocess.run(
        [
            sys.executable,
            "-c",
            "from reachlist.cli import main; main()",
            "rules",
            MAT,
            "-w",
            url,
            "-m",
            str(mapping),
            "--json",
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert ran.returncode == 0, ran.stderr[-2000:]
    assert "Warning" not in ran.stderr, ran.stderr[-2000:]
    remote = json.loads(ran.stdout)
    local = json.loads(
        CliRunner().invoke(main, ["rules", MAT, "-w", str(pristine), "--json"]).output
    )
    assert remote["n_baskets"] == local["n_baskets"]
    key = ("rule_id", "n_antecedent", "n_both", "significant")
    assert [tuple(r[k] for k in key) for r in remote["rules"]] == [
        tuple(r[k] for k in key) for r in local["rules"]
    ]


def test_rules_on_a_standalone_cluster_equal_duckdb(
    cluster: str, pristine: Path, tmp_path: Path
) -> None:
    _rules_equal_duckdb(cluster, pristine, tmp_path)


@pytest.fixture(scope="module")
def connect_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    if importlib.util.find_spec("grpc") is None:
        pytest.skip("Spark Connect needs pyspark's connect extra (pip install -e '.[test]')")
    import pyspark

    home = Path(pyspark.__file__).parent
    folder = tmp_path_factory.mktemp("connect")
    port = _free_port()
    log = folder / "server.log"
    env = {**os.environ, "SPARK_HOME": str(home)}
    with log.open("wb") as out:
        server = subprocess.Popen(
            [
                str(home / "bin" / "spark-submit"),
                "--class",
                "org.apache.spark.sql.connect.service.SparkConnectServer",
                "--master",
                "local[1]",
                "--conf",
                f"spark.connect.grpc.binding.port={port}",
                "--conf",
                "spark.ui.enabled=false",
            ],
            stdout=out,
            stderr=subprocess.STDOUT,
            env=env,
        )
    try:
        if not _wait_for(log, "Spark Connect server started", server):
            pytest.fail(f"the Spark Connect server did not start: {log.read_text()[-1500:]}")
        yield f"sc://127.0.0.1:{port}"
    finally:
        server.terminate()
        try:
            server.wait(timeout=30)
        except subprocess.TimeoutExpired:
            server.kill()


def test_rules_through_spark_connect_equal_duckdb(
    connect_server: str, pristine: Path, tmp_path: Path
) -> None:
    _rules_equal_duckdb(connect_server, pristine, tmp_path)
