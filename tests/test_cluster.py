"""Related lists and exports as tasks of a Dask distributed cluster (``--cluster``).

The reference is the same work done without a cluster: a build's related arrays and an export's file must
be identical, also when a worker dies in the middle of a task (Dask runs the task again elsewhere).
"""

from __future__ import annotations

import os
import signal
import socket
import sys
from pathlib import Path

import numpy as np
import pytest

distributed = pytest.importorskip("distributed", reason="Dask distributed is in the test extra")
import cloudpickle  # noqa: E402  (installed with distributed)

from rankrec.build import build_index  # noqa: E402
from rankrec.cli import main  # noqa: E402
from rankrec.cluster import ClusterAddress, check_workers, cluster_address, local_cluster  # noqa: E402
from rankrec.configuration import Configuration  # noqa: E402
from rankrec.demo import import_demo  # noqa: E402
from rankrec.errors import ClusterUnavailable, UsageError  # noqa: E402
from rankrec.export import export_lists  # noqa: E402
from rankrec.index import RELATED_ARRAYS, load_index  # noqa: E402
from rankrec.store import Store  # noqa: E402

cloudpickle.register_pickle_by_value(sys.modules[__name__])  # the plugin below reaches the workers by value


class KillOnFirstBlock(distributed.WorkerPlugin):
    """Kill the worker process (SIGKILL, as the kernel's out-of-memory killer would) when a block task
    starts on it: once in all (``marker`` is made with O_EXCL), or every time when ``marker`` is None."""

    def __init__(self, prefix: str, marker: str | None) -> None:
        self.prefix = prefix
        self.marker = marker

    def transition(self, key, start, finish, **kwargs) -> None:
        if finish != "executing" or not str(key).startswith(self.prefix):
            return
        if self.marker is not None:
            try:
                os.close(os.open(self.marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY))
            except FileExistsError:
                return
        os.kill(os.getpid(), signal.SIGKILL)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo store and its index built here by push (every page precomputed, the learnt ranker)."""
    folder = tmp_path_factory.mktemp("cluster")
    wiki = import_demo(folder / "demo")
    with Store(wiki, create=False) as store:
        built = build_index(store, folder / "local", method="push")
    return wiki, built


@pytest.fixture(scope="module")
def scheduler():
    """A running local cluster: two single-threaded worker processes, reached by its tcp address."""
    with local_cluster(2) as cluster:
        yield cluster.scheduler_address


def _related(folder: Path) -> dict[str, np.ndarray]:
    return {name: np.load(Path(folder) / f"related_{name}.npy") for name in RELATED_ARRAYS}


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("local:3", ClusterAddress(local_workers=3)),
        (" tcp://10.1.2.3:8786 ", ClusterAddress(scheduler="tcp://10.1.2.3:8786")),
        ("tls://sched.example.internal:9000", ClusterAddress(scheduler="tls://sched.example.internal:9000")),
        ("tcp://[::1]:8786", ClusterAddress(scheduler="tcp://[::1]:8786")),
    ],
)
def test_cluster_addresses_are_read(text, expected):
    assert cluster_address(text) == expected


@pytest.mark.parametrize(
    "text",
    ["local:0", "local:999", "local:", "tcp://host", "tcp://host:0", "tcp://host:70000", "http://h:1", ""],
)
def test_a_bad_cluster_address_is_a_usage_error(text, capsys):
    with pytest.raises(UsageError, match="--cluster"):
        cluster_address(text)
    with pytest.raises(SystemExit) as stopped:  # argparse: exit 2 with the reason
        main(["build", "--wiki", "w.db", "--index", "i", "--cluster", text])
    assert stopped.value.code == 2
    assert "--cluster" in capsys.readouterr().err


def test_a_build_on_a_cluster_equals_the_local_build_when_a_worker_dies_mid_task(demo, scheduler, tmp_path):
    wiki, local = demo
    marker = tmp_path / "killed-once"
    with distributed.Client(scheduler) as client:
        client.register_plugin(KillOnFirstBlock("related_block-", str(marker)), name="kill-once")
        try:
            with Store(wiki, create=False) as store:
                built = build_index(
                    store, tmp_path / "index", method="push", cluster=cluster_address(scheduler)
                )
        finally:
            client.unregister_worker_plugin("kill-once")
        client.wait_for_workers(2, timeout=60)  # the nanny starts the killed worker again
    assert marker.exists()  # a worker really died while running a block
    ours, reference = _related(built), _related(local)
    for name in RELATED_ARRAYS:  # no block missing, repeated or out of place
        np.testing.assert_array_equal(ours[name], reference[name], err_msg=name)
    assert load_index(built).manifest.precompute["cluster"] == scheduler
    assert load_index(local).manifest.precompute["cluster"] is None


def test_a_block_that_keeps_killing_its_worker_ends_the_build_with_nothing_published(demo, tmp_path):
    import dask

    wiki, _ = demo
    with (
        dask.config.set({"distributed.scheduler.allowed-failures": 0}),
        local_cluster(1) as cluster,
        distributed.Client(cluster) as client,
    ):
        client.register_plugin(KillOnFirstBlock("related_block-", None), name="kill-always")
        plain = Configuration().with_values(ranker="none", text_weight=0.0)  # straight to the related step
        address = cluster_address(cluster.scheduler_address)
        with Store(wiki, create=False) as store, pytest.raises(ClusterUnavailable, match="lost its worker"):
            build_index(store, tmp_path / "index", plain, method="push", cluster=address)
    assert list(tmp_path.iterdir()) == []  # no index, no staging folder left


def test_an_export_on_a_cluster_writes_the_same_file(demo, scheduler, tmp_path, capsys):
    wiki, local = demo
    alone = export_lists(load_index(local), tmp_path / "alone.jsonl", format="jsonl", k=7)
    code = main(
        [
            "export",
            "--wiki",
            str(wiki),
            "--index",
            str(local),
            "--out",
            str(tmp_path / "cluster.jsonl"),
            "-k",
            "7",
            "--cluster",
            scheduler,
        ]
    )
    assert code == 0, capsys.readouterr().err
    assert (tmp_path / "cluster.jsonl").read_bytes() == (tmp_path / "alone.jsonl").read_bytes()
    assert alone.lists == len((tmp_path / "alone.jsonl").read_text().splitlines())


def test_workers_that_cannot_read_the_folder_are_named(scheduler, tmp_path):
    with (
        distributed.Client(scheduler) as client,
        pytest.raises(ClusterUnavailable, match="cannot read") as error,
    ):
        check_workers(client, tmp_path / "not-shared")
    assert "2 of 2 workers" in str(error.value)


def test_a_build_stops_at_once_when_the_scheduler_cannot_be_reached(monkeypatch, demo, tmp_path):
    import rankrec.cluster

    monkeypatch.setattr(rankrec.cluster, "CONNECT_SECONDS", 1)
    monkeypatch.setattr("rankrec.build.build_basis", _never)  # the check comes before any real work
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    wiki, _ = demo
    address = cluster_address(f"tcp://127.0.0.1:{port}")
    with Store(wiki, create=False) as store, pytest.raises(ClusterUnavailable, match="cannot connect"):
        build_index(store, tmp_path / "index", method="push", cluster=address)
    assert list(tmp_path.iterdir()) == []


def _never(*args, **kwargs):
    raise AssertionError("the build went on past a cluster it cannot use")


def test_an_unreachable_scheduler_is_a_clear_error(monkeypatch, demo, tmp_path, capsys):
    import rankrec.cluster

    monkeypatch.setattr(rankrec.cluster, "CONNECT_SECONDS", 1)
    with socket.socket() as probe:  # a port with nobody listening
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    wiki, local = demo
    code = main(
        ["export", "--wiki", str(wiki), "--index", str(local), "--out", str(tmp_path / "x.json")]
        + ["--cluster", f"tcp://127.0.0.1:{port}"]
    )
    assert code == 2
    assert f"cluster tcp://127.0.0.1:{port} cannot be used: cannot connect" in capsys.readouterr().err
    assert not (tmp_path / "x.json").exists()


def test_without_dask_the_cluster_option_says_what_to_install(monkeypatch, demo, tmp_path):
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if the extra were not installed
    wiki, _ = demo
    monkeypatch.setattr("rankrec.build.build_basis", _never)  # said before any real work
    with Store(wiki, create=False) as store, pytest.raises(UsageError, match=r"rankrec\[cluster\]"):
        build_index(store, tmp_path / "index", method="push", cluster=ClusterAddress(local_workers=1))
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("kind", ["temporal", "sessions"])
def test_sweeps_on_a_cluster_choose_what_they_choose_here(kind, scheduler):
    from rankrec.build import Evidence
    from rankrec.evaluate.sweeps import choose_configuration
    from tests.evaluate.test_baselines import _random_graph, _random_views
    from tests.evaluate.test_sweeps import SMALL, _splits

    views = _random_views(4, views=900, span=20_000.0)
    split = _splits(kind, views)
    evidence = Evidence.from_links(_random_graph(views[3], 4))
    here = choose_configuration(split, evidence, grid=SMALL)
    seen = []
    there = choose_configuration(
        split,
        evidence,
        grid=SMALL,
        cluster=cluster_address(scheduler),
        progress=lambda *done: seen.append(done),
    )
    assert there.configuration == here.configuration and there.score == here.score
    assert len(there.sweeps) == len(here.sweeps)
    for one, other in zip(there.sweeps, here.sweeps, strict=True):
        np.testing.assert_array_equal(one.scores, other.scores)
    assert [done[1] for done in seen] == list(range(1, len(seen) + 1))  # every build reported, in count
