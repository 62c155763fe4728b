"""Forecasts keep being served while an import and a training run happen:
no errors, and each answer comes from one whole model, old or new.

Bounded: a fixed number of requests from a few client threads, sent only to
127.0.0.1, with timeouts; the server stops itself at the end.
"""

from __future__ import annotations

import shutil
import threading
from pathlib import Path

import httpx
from conftest import TOKEN
from support.serving import serve

from service.api.app import create_app
from service.settings import Settings
from service.workspace import Workspace

THREADS, PER_THREAD = 3, 12


def test_forecasts_during_import_and_training(demo_home, embedder, tmp_path: Path, capsys) -> None:
    shutil.copytree(demo_home, tmp_path / "home")
    ws = Workspace(settings=Settings(home=tmp_path / "home", token=TOKEN), embedder=embedder)
    old = ws.forecaster.model("impressions")
    old_bt = old.backtested_at(0.8)
    assert old_bt is not None
    csv_text = "post_id,account,text,posted_at,impressions\n" + "".join(
        f"c-{i},loomhaven,Late tulips along the lake path (note {i}),2026-10-{1 + i % 28:02d}T11:00Z,"
        f"{900 + i}\n"
        for i in range(60)
    )

    served = serve(create_app(workspace=ws))
    base = served.__enter__()
    answers: list[dict] = []
    errors: list[str] = []
    lock = threading.Lock()
    changing = threading.Event()
    results: dict[str, int] = {}

    def forecasts(t: int) -> None:
        with httpx.Client(base_url=base, timeout=120) as c:
            for i in range(PER_THREAD):
                r = c.post(
                    "/v1/forecasts",
                    json={
                        "text": f"Magnolias in the Long Border, week {i}",
                        "account": "loomhaven",
                        "planned_at": "2026-12-03T12:00",
                    },
                )
                with lock:
                    if r.status_code == 200:
                        answers.append({**r.json(), "_during": changing.is_set()})
                    else:
                        errors.append(f"{r.status_code} {r.text[:200]}")

    def changes() -> None:
        auth = {"Authorization": f"Bearer {TOKEN}"}
        changing.set()
        with httpx.Client(base_url=base, timeout=600, headers=auth) as c:
            r = c.post("/v1/imports", files={"file": ("more.csv", csv_text.encode(), "text/csv")})
            results["import"] = r.status_code
            r = c.post("/v1/training", json={"metric": "impressions", "backtest": False})
            results["training"] = r.status_code
            results["new_version"] = r.json().get("model_version") if r.status_code == 200 else None
        changing.clear()

    workers = [threading.Thread(target=changes)] + [
        threading.Thread(target=forecasts, args=(t,)) for t in range(THREADS)
    ]
    for w in workers:
        w.start()
    for w in workers:
        w.join(timeout=900)
    served.__exit__(None, None, None)
    ws.close()

    assert results.get("import") == 200 and results.get("training") == 200, results
    assert errors == [], errors[:3]
    assert len(answers) == THREADS * PER_THREAD
    new = results["new_version"]
    assert new != old.version
    seen = {a["model_version"] for a in answers}
    assert seen <= {old.version, new}
    # Never a mix: the old model's answers carry its backtested coverage; the
    # new one was trained without a backtest, so its answers carry none.
    for a in answers:
        expected = old_bt if a["model_version"] == old.version else None
        assert a["backtested_coverage"] == expected
        assert a["low"] <= a["median"] <= a["high"]
    assert sum(a["_during"] for a in answers) > 0, "no forecast overlapped the changes"
    with capsys.disabled():
        print(
            f"\nconcurrency: {len(answers)} forecasts, {len(errors)} errors, "
            f"{sum(a['_during'] for a in answers)} during import+training, versions seen: "
            f"{sorted(seen)}"
        )
