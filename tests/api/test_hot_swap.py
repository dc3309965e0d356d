"""Index hot swap: a new publication is picked up while requests run; bad ones are refused.

Publications go through :func:`rankrec._atomic.publish_folder`, as ``rankrec build`` does, with
copies of the demo index whose manifest is edited (a new build time, or a defect).
"""

from __future__ import annotations

import json
import random
import shutil
import threading
import time
from pathlib import Path
from urllib.parse import quote

import httpx
import numpy as np

from api.app import create_app
from rankrec._atomic import publish_folder
from tests._serving import serve_in_thread
from tests.api.conftest import TestClient, settings_for


def _publish(paths: dict, source: Path, edit=None) -> str:
    """Publish a copy of the index folder ``source`` over ``paths['index']``; returns the new folder name."""

    def write(staging: Path) -> None:
        for item in source.iterdir():
            if item.is_dir():
                shutil.copytree(item, staging / item.name)
            else:
                shutil.copy2(item, staging / item.name)
        manifest = json.loads((staging / "manifest.json").read_text())
        manifest["created"] = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
        if edit is not None:
            edit(staging, manifest)
        if (staging / "manifest.json").exists():
            (staging / "manifest.json").write_text(json.dumps(manifest))

    return publish_folder(paths["index"], write).name


def _wait(predicate, seconds: float = 10.0) -> None:
    deadline = time.monotonic() + seconds
    while not predicate():
        assert time.monotonic() < deadline, "timed out"
        time.sleep(0.02)


def test_no_request_fails_while_new_indexes_are_published(private_copy, demo, reader, admin):
    source = demo["index"].resolve()
    app = create_app(settings_for(private_copy, watch_seconds=0.05))
    index = app.state.service.live.current.index
    pages = [index.pages[i] for i in range(0, index.size, 7) if index.public[i]]
    failures, served_by, counts = [], set(), [0]
    stop = threading.Event()

    def load(base: str, seed: int) -> None:
        rng = random.Random(seed)
        with httpx.Client(base_url=base, headers=reader, timeout=10) as http:
            while not stop.is_set():
                page = rng.choice(pages)
                try:
                    answer = http.get(f"/v1/pages/{quote(page, safe='')}/related", params={"k": 5})
                except httpx.HTTPError as error:
                    failures.append(repr(error))
                    continue
                counts[0] += 1
                if answer.status_code != 200 or len(answer.json()["items"]) != 5:
                    failures.append((answer.status_code, answer.text[:200]))
                else:
                    served_by.add(answer.json()["index"])

    with serve_in_thread(app) as base:
        threads = [threading.Thread(target=load, args=(base, seed)) for seed in range(4)]
        for thread in threads:
            thread.start()
        published = []
        for round_ in range(4):
            time.sleep(0.25)
            published.append(_publish(private_copy, source))
            if round_ % 2:  # some swaps by the admin call, the others by the watcher
                httpx.post(f"{base}/v1/index/reload", headers=admin, timeout=10)
            _wait(lambda: httpx.get(f"{base}/v1/health", timeout=10).json()["index"] == published[-1])
        time.sleep(0.2)
        stop.set()
        for thread in threads:
            thread.join(timeout=20)
        metrics = httpx.get(f"{base}/metrics", timeout=10).text
    assert failures == []
    assert counts[0] > 50 and len(served_by) >= 3  # answers came from several publications
    assert "rankrec_index_swaps_total 4.0" in metrics


def test_corrupt_stale_and_incomplete_indexes_are_refused_and_the_old_one_keeps_serving(
    private_copy, demo, reader, admin
):
    source = demo["index"].resolve()
    client = TestClient(create_app(settings_for(private_copy)))
    first = client.get("/v1/health").json()["index"]
    page = quote(client.get("/v1/pages", headers=reader).json()["pages"][0]["page"], safe="")
    expected = client.get(f"/v1/pages/{page}/related", headers=reader).json()["items"]

    defects = {
        "not json": lambda staging, manifest: (staging / "names.json").write_text("{ not json"),
        "future format": lambda staging, manifest: manifest.update({"format_version": 99}),
        "missing array": lambda staging, manifest: (staging / "pages.bytes.npy").unlink(),
        "other graph": lambda staging, manifest: manifest.update(
            {"fingerprint": "0" * 16, "store_import": -1}
        ),
        # loads (arrays are read when used), but no list can be made from it: the warm-up finds out
        "cannot answer": lambda staging, manifest: np.save(staging / "related_row.npy", np.full(2, 7)),
    }
    reasons = {}
    for name, edit in defects.items():
        refused = _publish(private_copy, source, edit)
        outcome = client.post("/v1/index/reload", headers=admin).json()
        assert outcome["outcome"] == "refused" and outcome["index"] == first, name
        assert str(private_copy["folder"]) not in json.dumps(outcome)
        reasons[name] = outcome["reason"]
        health = client.get("/v1/health").json()
        assert health["index"] == first and health["last_refusal"] == outcome["reason"], name
        answer = client.get(f"/v1/pages/{page}/related", headers=reader)
        assert answer.status_code == 200 and answer.json()["items"] == expected, name
        assert answer.json()["index"] == first != refused
    assert "format 99" in reasons["future format"] and "stale" in reasons["other graph"]
    assert "readable" in reasons["not json"] and "readable" in reasons["missing array"]
    assert "cannot answer a list" in reasons["cannot answer"]
    good = _publish(private_copy, source)
    assert client.post("/v1/index/reload", headers=admin).json() == {
        "outcome": "swapped",
        "index": good,
        "reason": None,
    }
    assert client.get("/v1/health").json()["last_refusal"] is None


def test_the_watcher_refuses_a_bad_publication_once_and_swaps_the_next_good_one(private_copy, demo):
    source = demo["index"].resolve()
    app = create_app(settings_for(private_copy, watch_seconds=0.02))
    with TestClient(app) as client:  # the lifespan runs the watcher
        first = client.get("/v1/health").json()["index"]
        _publish(private_copy, source, lambda staging, manifest: manifest.update({"format_version": 99}))
        _wait(lambda: client.get("/v1/health").json()["last_refusal"] is not None)
        time.sleep(0.2)  # several more watcher rounds
        health = client.get("/v1/health").json()
        assert health["index"] == first and "format" in health["last_refusal"]
        assert "rankrec_index_refusals_total 1.0" in client.get("/metrics").text
        good = _publish(private_copy, source)
        _wait(lambda: client.get("/v1/health").json()["index"] == good)
