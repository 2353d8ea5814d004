"""`rigside batch --engine dask --scheduler ADDRESS` against a real dask.distributed cluster on the
loopback interface (worker processes, one thread each)."""

import contextlib
import csv
import os
import signal
import threading
import time

import pytest

distributed = pytest.importorskip("distributed")   # the dask extra

from rigside.cli.main import main  # noqa: E402
from rigside.core.io.atomic import temporary_beside  # noqa: E402

STEMS = ("r0", "r1")


@pytest.fixture(scope="module")
def recordings(tmp_path_factory):
    """Two short synthetic recordings, a broken one, and their outputs from the sequential engine."""
    d = tmp_path_factory.mktemp("cluster")
    for i, stem in enumerate(STEMS):
        assert main(["synth", str(d / f"{stem}.bin"), "--seconds", "2", "--channels", "4", "--seed", str(i)]) == 0
    (d / "broken.bin").write_bytes(b"\x00" * 7)
    (d / "broken.rigside.toml").write_text("[recording]\nchannels = 4\nrate_hz = 30000\n")
    files = [str(d / "r0.bin"), str(d / "broken.bin"), str(d / "r1.bin")]
    assert main(["batch", *files, "--out-dir", str(d / "sequential"), "--quiet"]) == 2   # broken fails
    return d, files


@contextlib.contextmanager
def local_cluster(n_workers):
    with distributed.LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=":0") as c:
        yield c


@pytest.fixture(scope="module")
def cluster():
    """Two worker processes, shared by the tests of this module (each start costs seconds)."""
    with local_cluster(2) as c:
        yield c


def outcomes(folder):
    return {os.path.basename(row["recording"]): row for row in csv.DictReader(open(folder / "batch.csv"))}


def assert_same_as_sequential(d, out):
    """Event files and summaries byte for byte as the sequential engine wrote them, and the broken
    recording listed as failed (determinism of the detection: common practice, no source)."""
    for stem in STEMS:
        for name in (f"{stem}.events.csv", f"{stem}.summary.json"):
            assert (out / name).read_bytes() == (d / "sequential" / name).read_bytes(), name
    rows, seq = outcomes(out), outcomes(d / "sequential")
    assert [rows[f"{s}.bin"]["status"] for s in STEMS] == ["done", "done"]
    assert [rows[f"{s}.bin"]["events"] for s in STEMS] == [seq[f"{s}.bin"]["events"] for s in STEMS]
    assert int(rows["r0.bin"]["events"]) > 0
    assert rows["broken.bin"]["status"] == "failed" and "multiple of channels" in rows["broken.bin"]["message"]
    assert not list(out.glob(".*.tmp"))   # no temporary file left behind


def test_cluster_batch_writes_what_the_sequential_engine_writes(recordings, cluster, capsys):
    d, files = recordings
    code = main(["batch", *files, "--out-dir", str(d / "cluster"), "--engine", "dask",
                 "--scheduler", cluster.scheduler_address])
    assert code == 2   # the broken recording failed, the others were done
    assert_same_as_sequential(d, d / "cluster")
    captured = capsys.readouterr()
    assert "3 of 3 tasks done" in captured.err and "2 of 3 recordings done" in captured.out


def test_cancel_stops_waiting_and_writes_no_table(recordings, cluster, tmp_path):
    from rigside.core.params import Params
    from rigside.core.progress import Cancelled
    from rigside.core.runs.batch import run_batch
    d, files = recordings
    seen = []
    with pytest.raises(Cancelled):
        run_batch(files, tmp_path, Params(), engine="dask", scheduler=cluster.scheduler_address,
                  progress=lambda f, m: seen.append(m), cancel=lambda: bool(seen))
    assert seen == ["0 of 3 tasks done"] and not (tmp_path / "batch.csv").exists()


class BlockFirstAttempt(distributed.WorkerPlugin):
    """On a worker: the first attempt at ``target`` leaves a half-written output, writes its worker's
    pid to ``started`` and waits to be killed; a later attempt writes its pid to ``retried`` and runs."""

    name = "block-first-attempt"

    def __init__(self, target, started, retried, out_file):
        self.target, self.started, self.retried, self.out_file = target, started, retried, out_file

    def setup(self, worker):
        from rigside.core.runs import batch_task
        real, plugin = batch_task._detect_one, self
        self.restore = lambda: setattr(batch_task, "_detect_one", real)

        def detect_one(path, *args):
            if path == plugin.target:
                first = not os.path.exists(plugin.started)
                mark = plugin.started if first else plugin.retried
                if first:
                    temporary_beside(plugin.out_file)
                with open(mark + ".part", "w") as fh:
                    fh.write(str(os.getpid()))
                os.replace(mark + ".part", mark)
                if first:
                    threading.Event().wait(120)   # ended by the test's kill
            return real(path, *args)
        batch_task._detect_one = detect_one

    def teardown(self, worker):
        self.restore()


def wait_for(path, limit_s=120.0):
    deadline = time.monotonic() + limit_s
    while not os.path.exists(path):
        assert time.monotonic() < deadline, f"{path} never appeared"
        time.sleep(0.05)


def test_a_worker_killed_mid_task_is_replaced_and_the_batch_completes(recordings, cluster, tmp_path):
    d, files = recordings
    out = tmp_path / "out"
    started, retried = str(tmp_path / "started"), str(tmp_path / "retried")
    with distributed.Client(cluster, set_as_default=False) as client:
        client.register_plugin(BlockFirstAttempt(files[2], started, retried, str(out / "r1.events.csv")))
        try:
            codes = []
            run = threading.Thread(target=lambda: codes.append(main([
                "batch", *files, "--out-dir", str(out), "--engine", "dask", "--scheduler", cluster.scheduler_address,
                "--quiet"])))
            run.start()
            wait_for(started)
            killed = int(open(started).read())
            assert killed in {w.process.pid for w in cluster.workers.values()}   # a worker process, not this one
            os.kill(killed, signal.SIGKILL)
            run.join(timeout=120)
            assert not run.is_alive() and codes == [2]
        finally:
            client.unregister_worker_plugin(BlockFirstAttempt.name)
    assert int(open(retried).read()) != killed   # the task ran again in another process
    assert_same_as_sequential(d, out)


class OtherVersion(distributed.WorkerPlugin):
    """On a worker: rigside claims another version while the plugin is registered."""

    name = "other-version"

    def setup(self, worker):
        import rigside.core
        self.real, rigside.core.__version__ = rigside.core.__version__, "0.0.0-other"

    def teardown(self, worker):
        import rigside.core
        rigside.core.__version__ = self.real


def test_workers_running_another_rigside_are_refused(recordings, cluster, tmp_path, capsys):
    d, files = recordings
    out = tmp_path / "out"
    with distributed.Client(cluster, set_as_default=False) as client:
        client.register_plugin(OtherVersion())
        try:
            line = refuses(["batch", files[0], "--out-dir", str(out), "--engine", "dask", "--scheduler",
                            cluster.scheduler_address, "--quiet"], capsys, out)
        finally:
            client.unregister_worker_plugin(OtherVersion.name)
    assert "must run rigside" in line and "0.0.0-other on tcp://127.0.0.1:" in line


def refuses(args, capsys, out):
    """Exit 2 with one error line, and no output folder made."""
    assert main(args) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert not out.exists()
    return err[0]


@contextlib.contextmanager
def listener(reply: bytes | None):
    """A loopback TCP server that is not a scheduler: it sends ``reply`` (or nothing) to each caller."""
    import socket
    srv = socket.create_server(("127.0.0.1", 0))
    conns = []

    def serve():
        with contextlib.suppress(OSError):
            while True:
                conn, _ = srv.accept()
                conns.append(conn)
                if reply is not None:
                    conn.sendall(reply)
    threading.Thread(target=serve, daemon=True).start()
    try:
        yield f"tcp://127.0.0.1:{srv.getsockname()[1]}"
    finally:
        srv.close()
        for conn in conns:
            conn.close()


def closed_port() -> str:
    import socket
    with socket.create_server(("127.0.0.1", 0)) as s:
        return f"tcp://127.0.0.1:{s.getsockname()[1]}"


@pytest.mark.parametrize("kind", ["closed", "syntax", "scheme", "http", "silent"])
def test_bad_scheduler_address_is_one_line_within_the_timeout(recordings, tmp_path, capsys, kind):
    d, files = recordings
    out = tmp_path / "out"
    with contextlib.ExitStack() as stack:
        address = {"closed": closed_port, "syntax": lambda: "no-port-here", "scheme": lambda: "carrier://x:1",
                   "http": lambda: stack.enter_context(listener(b"HTTP/1.0 200 OK\r\n\r\nhello")),
                   "silent": lambda: stack.enter_context(listener(None))}[kind]()
        line = refuses(["batch", files[0], "--out-dir", str(out), "--engine", "dask", "--scheduler", address,
                        "--connect-timeout", "1", "--quiet"], capsys, out)
    assert "dask scheduler must answer at" in line and address in line


def test_a_scheduler_without_workers_is_refused(recordings, tmp_path, capsys):
    d, files = recordings
    out = tmp_path / "out"
    with local_cluster(0) as c:
        line = refuses(["batch", files[0], "--out-dir", str(out), "--engine", "dask", "--scheduler",
                        c.scheduler_address, "--connect-timeout", "1", "--quiet"], capsys, out)
    assert "must have a worker" in line and "dask worker" in line


@pytest.mark.parametrize("args,msg", [
    (["--scheduler", "tcp://127.0.0.1:1"], "must come with the dask engine"),
    (["--engine", "dask", "--scheduler", "tcp://127.0.0.1:1", "--connect-timeout", "0"], "scheduler timeout"),
    (["--engine", "dask", "--scheduler", "tcp://127.0.0.1:1", "--connect-timeout", "nan"], "scheduler timeout"),
])
def test_bad_scheduler_options(recordings, tmp_path, capsys, args, msg):
    d, files = recordings
    out = tmp_path / "out"
    assert msg in refuses(["batch", files[0], "--out-dir", str(out), *args, "--quiet"], capsys, out)
