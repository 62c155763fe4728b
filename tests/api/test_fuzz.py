"""Property-based fuzzing of the HTTP API with schemathesis (4.x), against a
served demo store.

A copy of the demo data directory (3,000 invented posts, a trained model) is
served by uvicorn on loopback, as `sounding serve` serves it (the same app
factory and guarded HTTP protocol), with a token. Every operation in the
app's own OpenAPI schema gets generated requests, valid ones and
(schemathesis' negative mode) invalid ones, each sent over HTTP twice:
without credentials and with the bearer token, so the write endpoints are
exercised past the token check too. Every answer must pass every check
schemathesis has (its `--checks all`; the reference here, not our own code):
no 5xx, a status code and content type the schema declares, a body that
conforms to the declared schema (for errors the one ErrorBody shape), valid
data accepted and invalid data refused - so the declared constraints
(formats, ranges, lengths, required fields) are the ones the server applies.
The seed is fixed (hypothesis' derandomize) and the cases per operation are
bounded.
"""

from __future__ import annotations

import csv
import json
import shutil
import tempfile
from collections import Counter
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
import schemathesis
from conftest import TOKEN
from hypothesis import HealthCheck, given, settings
from schemathesis import GenerationMode
from schemathesis.specs.openapi.checks import positive_data_acceptance
from support.serving import serve

from service.api import guard
from service.api.app import create_app
from service.api.schemas import ErrorBody
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace

MAX_EXAMPLES = 30
#: Operations that run a model fit or a backtest per request get fewer cases.
#: Those that cluster or compare the whole history get fewer too: against the
#: demo store each call takes seconds, and the suite has a time budget.
SLOW_EXAMPLES = {
    "GET /v1/surprises": 3,
    "POST /v1/training": 2,
    "GET /v1/topics": 5,
    "GET /v1/map": 5,
    "GET /v1/team": 8,
    "POST /v1/trends": 15,
    "POST /v1/segments": 20,
    "GET /v1/distribution": 20,
}
#: Seconds a request may take: training the demo store with its backtest
#: takes tens of seconds on a loaded 2-core machine (schemathesis' default is 10).
REQUEST_TIMEOUT = 300
CASES: Counter[str] = Counter()
MODE_CASES: Counter[str] = Counter()
CALLS: Counter[str] = Counter()
#: Answers of 2xx per operation (with the token): the fuzz reaches real answers, not only refusals.
ANSWERED: Counter[str] = Counter()

SUBJECTS = [
    "Magnolias",
    "The tulip beds",
    "Our bee hotel",
    "The fern house",
    "The rose arbour",
    "Seed-cleaning volunteers",
    "The winter garden",
    "Pond dipping",
]
ENDINGS = [
    "are at their best this week.",
    "need a hand on Saturday morning.",
    "open early for members.",
    "get a new path this spring.",
    "are back after the rain.",
]


def write_history(path: Path, n: int) -> Path:
    # Reach that varies with the subject and over time, so a trained model has something to learn.
    start = datetime(2025, 3, 1, 9, tzinfo=UTC)
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions", "engagements"])
        for i in range(n):
            text = f"{SUBJECTS[i % len(SUBJECTS)]} {ENDINGS[i % len(ENDINGS)]} Visit {i}."
            when = (start + timedelta(hours=7 * i)).isoformat()
            w.writerow(
                [
                    f"fz-{i:03d}",
                    ("loomhaven", "loomhaven_lab")[i % 2],
                    text,
                    when,
                    400 + 37 * (i % 50) + 90 * (i % len(SUBJECTS)),
                    10 + i,
                ]
            )
    return path


@pytest.fixture(scope="module")
def fuzz_workspace(tmp_path_factory: pytest.TempPathFactory, demo_home: Path, embedder) -> Workspace:
    # A private copy of the demo store, trained, so forecasts, hours, wordings
    # and account choices answer (and their answers are checked against the
    # schema), not only refuse; fuzzed writes never reach the shared copy.
    home = tmp_path_factory.mktemp("fuzz") / "home"
    shutil.copytree(demo_home, home)
    ws = Workspace(settings=Settings(home=home, token=TOKEN), embedder=embedder)
    yield ws
    ws.close()


def _openapi_document() -> dict:
    """The app's own OpenAPI document. Built at import, before fixtures exist,
    over a throw-away empty workspace: describing the API loads no model."""
    with tempfile.TemporaryDirectory() as tmp:
        ws = Workspace(settings=Settings(home=Path(tmp) / "home", token=TOKEN))
        try:
            return create_app(workspace=ws).openapi()
        finally:
            ws.close()


schema = schemathesis.openapi.from_dict(_openapi_document())


@pytest.fixture(scope="module")
def fuzz_url(fuzz_workspace: Workspace):
    """The demo copy served over HTTP on loopback, as `sounding serve` runs it."""
    settings = fuzz_workspace.settings
    app = create_app(workspace=fuzz_workspace, bound_host="127.0.0.1")
    with serve(app, http=guard.protocol(settings), timeout_keep_alive=settings.keep_alive_seconds) as url:
        # Checks that send a request of their own (a resource asked for again,
        # the same request without its credentials) go to the served app too.
        schema.config.update(base_url=url, request_timeout=REQUEST_TIMEOUT)
        yield url


@pytest.fixture(scope="module")
def fuzz_app(fuzz_workspace: Workspace):
    """The same app in process, for the edge requests below."""
    return create_app(workspace=fuzz_workspace)


# One test item per operation and generation mode, built from the schema at
# collection: each is an ordinary pytest item, so a run on several workers
# (pytest-xdist, a file per worker) fuzzes every operation exactly as a serial
# run does.
OPERATIONS = [result.ok() for result in schema.get_all_operations()]
# Where a request declared valid may still be refused for what a schema cannot
# state, schemathesis' "valid data is accepted" check is left out, and only
# there: an uploaded file's content (checked row by row in the tests below),
# a time range that ends before it starts, and a segments figure of a split
# the request does not make (`plot` must name `by` or "topic": relations
# between two fields), and a new account's handle, whose "letters of any script" no ECMA-262
# pattern without Unicode classes can state (the schema states what a handle
# never holds). Draft texts, planned times, topic phrases and split edges are
# stated in the schema exactly as the server judges them, so the operations
# that take them get every check (segments, for its `plot`, all but one).
ACCEPTANCE_UNSTATABLE = {
    "POST /v1/imports",
    "POST /v1/precedents",
    "POST /v1/segments",
    "PUT /v1/accounts/{handle}",
}


def _has_inputs(operation) -> bool:
    raw = operation.definition.raw
    return bool(raw.get("parameters") or raw.get("requestBody"))


# An operation with no inputs has no invalid request to make.
FUZZ_ITEMS = [
    pytest.param(op, mode, id=f"{op.label}-{mode.value}")
    for op in OPERATIONS
    for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE)
    if mode is GenerationMode.POSITIVE or _has_inputs(op)
]


def _fuzz(operation, mode: GenerationMode, url: str) -> None:
    auth = {"Authorization": f"Bearer {TOKEN}"}
    # A write operation (one that declares the bearer scheme) is sent without
    # and with the token; a read is open, so one call with the token is enough.
    needs_token = bool(operation.definition.raw.get("security"))
    excluded = [positive_data_acceptance] if operation.label in ACCEPTANCE_UNSTATABLE else []

    @given(case=operation.as_strategy(generation_mode=mode))
    @settings(
        max_examples=SLOW_EXAMPLES.get(operation.label, MAX_EXAMPLES),
        deadline=None,
        derandomize=True,
        database=None,
        suppress_health_check=list(HealthCheck),
    )
    def run(case) -> None:
        CASES[operation.label] += 1
        MODE_CASES[mode.value] += 1
        # Every other valid case names an account the store holds (a generated
        # handle is never one), so forecasts are answered too, not only refused.
        body = case.body
        positive = mode is GenerationMode.POSITIVE and CASES[operation.label] % 2
        if positive and isinstance(body, dict) and isinstance(body.get("account"), str):
            body["account"] = "loomhaven"
        for headers in (None, auth) if needs_token else (auth,):
            response = case.call(base_url=url, headers=headers, timeout=REQUEST_TIMEOUT)
            CALLS["with token" if headers else "without token"] += 1
            assert response.status_code < 500, response.text
            if headers and response.status_code < 300:
                ANSWERED[operation.label] += 1
            if headers:
                # Every check schemathesis has (its `--checks all`), the
                # reference here rather than our own code; a refusal for a
                # missing token is checked by `ignored_auth` among them.
                case.validate_response(response, headers=headers, excluded_checks=excluded)

    run()


@pytest.mark.parametrize(("operation", "mode"), FUZZ_ITEMS)
def test_api_agrees_with_its_schema_on_generated_requests(operation, mode, fuzz_url: str) -> None:
    _fuzz(operation, mode, fuzz_url)


def test_every_operation_was_fuzzed(artifacts: Path, capsys: pytest.CaptureFixture[str]) -> None:
    if not CASES:
        pytest.skip("no fuzz case ran in this process (deselected)")
    operations = {op.label for op in OPERATIONS}
    missing = operations - set(CASES)
    assert not missing, f"operations never fuzzed: {sorted(missing)}"
    # Each operation with parameters or a body gets many cases; a bare GET
    # (no inputs at all) legitimately gets few.
    assert sum(CASES.values()) >= 3 * len(operations)
    assert MODE_CASES["positive"] > 0 and MODE_CASES["negative"] > 0
    # The write operations were sent both ways: refused without the token,
    # carried out (or refused for their input) with it.
    assert CALLS["without token"] > 0 and CALLS["with token"] > CALLS["without token"]
    # With a trained model, generated drafts get forecasts whose answers were
    # checked against the schema, not only errors.
    for label in ("POST /v1/forecasts", "POST /v1/hours", "POST /v1/precedents"):
        assert ANSWERED[label] > 0, f"{label} never answered 2xx"
    (artifacts / "fuzz.json").write_text(
        json.dumps(
            {
                "cases": sum(CASES.values()),
                "operations": len(operations),
                "per_operation": CASES,
                "by_mode": MODE_CASES,
                "calls": CALLS,
                "answered_2xx": ANSWERED,
                "max_examples": MAX_EXAMPLES,
            },
            indent=2,
        )
    )
    with capsys.disabled():
        print(
            f"\nfuzz: {sum(CASES.values())} generated cases over {len(operations)} operations "
            f"({', '.join(f'{k} {v}' for k, v in sorted(CASES.items()))}); "
            f"by mode: {dict(MODE_CASES)}; "
            f"calls: {dict(CALLS)}"
        )


# Inputs at the edges that generated cases rarely hit. Python's datetime
# holds years 1-9999 only (datetime.MINYEAR/MAXYEAR, Python docs), so an
# offset at either end leaves the calendar when turned into UTC; and naive
# and aware times cannot be compared (Python docs, datetime comparisons).
EDGE_TIMES = ["0001-01-01T00:00:00+05:00", "9999-12-31T23:59:59-05:00"]
EDGE_REQUESTS = [
    (
        "POST",
        "/v1/precedents",
        {"json": {"text": "Magnolias", "since": "2025-01-01T00:00:00", "until": "2025-06-01T00:00:00Z"}},
    ),
    *[("POST", "/v1/precedents", {"json": {"text": "Magnolias", "since": t}}) for t in EDGE_TIMES],
    *[("POST", "/v1/precedents", {"json": {"text": "Magnolias", "until": t}}) for t in EDGE_TIMES],
    *[
        ("POST", "/v1/forecasts", {"json": {"text": "Magnolias", "account": "loomhaven", "planned_at": t}})
        for t in EDGE_TIMES
    ],
    (
        "POST",
        "/v1/precedents",
        {"content": b'{"text": "\xff\xfe"}', "headers": {"Content-Type": "application/json"}},
    ),
    (
        "POST",
        "/v1/imports",
        {
            "files": {
                "file": (
                    "edge.csv",
                    (
                        "post_id,account,text,posted_at,impressions\n"
                        f"e1,loomhaven,Early bird,{EDGE_TIMES[0]},5\n"
                        "e2,loomhaven,Night owl,9999-12-31T23:30:00,5\n"
                    ).encode(),
                    "text/csv",
                )
            },
            "data": {"timezone": "America/New_York"},
        },
    ),
]


@pytest.mark.parametrize(("method", "path", "kw"), EDGE_REQUESTS)
def test_edge_inputs_are_answered_as_bad_input(fuzz_app, method: str, path: str, kw: dict) -> None:
    assert path in schema.raw_schema["paths"], f"{path} is not served"
    from fastapi.testclient import TestClient

    kw = dict(kw)
    with TestClient(fuzz_app, raise_server_exceptions=False) as c:
        r = c.request(
            method, path, headers={"Authorization": f"Bearer {TOKEN}", **kw.pop("headers", {})}, **kw
        )
    assert r.status_code < 500, r.text
    if r.status_code >= 400:
        assert r.status_code == 422, r.text
        ErrorBody.model_validate(r.json())
    elif path == "/v1/imports":
        # Each out-of-range row is rejected with its line and column; nothing crashes.
        assert [(p["line"], p["column"]) for p in r.json()["problems"]] == [
            (2, "posted_at"),
            (3, "posted_at"),
        ]


# Bad dates and huge numbers (hypothesis) -------------------------------------------------
#
# Times anywhere in Python's calendar (years 1-9999, any offset up to a day) and counts
# from negative to far past 2**64, written as people write them. Whether a row must be
# accepted is decided here from the generated parts with plain datetime and int
# arithmetic, not by sounding's parser: a time from 1990-01-01T00:00Z up to (not
# including) 2200-01-01T00:00Z, and a whole count from 0 to 2**53 (the last integer a float64
# holds exactly, IEEE 754).

from hypothesis import strategies as st  # noqa: E402

VALUE_TOKEN = "value-fuzz-token-0123456789abcdef"
LOW, HIGH = datetime(1990, 1, 1, tzinfo=UTC), datetime(2200, 1, 1, tzinfo=UTC)


@st.composite
def instants(draw) -> tuple[str, datetime | None]:
    """An ISO 8601 time with an offset, and its instant (None when it leaves the calendar)."""
    local = draw(st.datetimes(min_value=datetime(1, 1, 2), max_value=datetime(9999, 12, 30)))
    minutes = draw(st.integers(-23 * 60 - 59, 23 * 60 + 59))
    sign, m = ("+" if minutes >= 0 else "-"), abs(minutes)
    text = f"{local.year:04d}-{local:%m-%dT%H:%M:%S}{sign}{m // 60:02d}:{m % 60:02d}"
    try:
        instant = local.replace(tzinfo=UTC) - timedelta(minutes=minutes)
    except OverflowError:
        instant = None
    return text, instant


def in_range(instant: datetime | None) -> bool:
    return instant is not None and LOW <= instant < HIGH


COUNTS = st.one_of(
    st.integers(-(2**70), 2**70).map(lambda n: (str(n), 0 <= n <= 2**53)),
    st.sampled_from([2**53 - 1, 2**53, 2**53 + 1, 2**63 - 1, 2**63, 2**64]).map(
        lambda n: (str(n), n <= 2**53)
    ),
    st.floats(allow_nan=True, allow_infinity=True).map(
        lambda x: (repr(x), x == x and abs(x) != float("inf") and x >= 0 and x == int(x) and x <= 2**53)
    ),
)


@pytest.fixture(scope="module")
def value_app(tmp_path_factory: pytest.TempPathFactory, embedder):
    home = tmp_path_factory.mktemp("values") / "home"
    ws = Workspace(settings=Settings(home=home, token=VALUE_TOKEN), embedder=embedder)
    ws.import_csv(write_history(home.parent / "history.csv", 6), ImportOptions(new_accounts="UTC"))
    yield create_app(workspace=ws)
    ws.close()


@given(rows=st.lists(st.tuples(instants(), COUNTS), min_size=1, max_size=6))
@settings(
    max_examples=40, deadline=None, derandomize=True, database=None, suppress_health_check=list(HealthCheck)
)
def test_import_refuses_exactly_the_bad_dates_and_huge_numbers(value_app, rows) -> None:
    from fastapi.testclient import TestClient

    lines = ["post_id,account,text,posted_at,impressions"]
    want_rejected = []
    for i, ((when, instant), (count, count_ok)) in enumerate(rows):
        lines.append(f"v{i},loomhaven,Fuzz row {i},{when},{count}")
        if not (in_range(instant) and count_ok):
            want_rejected.append(i + 2)
    with TestClient(value_app, raise_server_exceptions=False) as c:
        r = c.post(
            "/v1/imports",
            headers={"Authorization": f"Bearer {VALUE_TOKEN}"},
            files={"file": ("v.csv", ("\n".join(lines) + "\n").encode(), "text/csv")},
        )
    assert r.status_code == 200, r.text
    body = r.json()
    assert [p["line"] for p in body["problems"]] == want_rejected, (rows, body["problems"])
    assert body["added"] + body["updated"] + body["unchanged"] == len(rows) - len(want_rejected)


@given(when=instants())
@settings(
    max_examples=40, deadline=None, derandomize=True, database=None, suppress_health_check=list(HealthCheck)
)
def test_forecast_refuses_planned_times_outside_the_range(value_app, when) -> None:
    from fastapi.testclient import TestClient

    text, _ = when
    # A planned time is judged by its year as written, before its offset is
    # applied: what the schema's pattern states (service.clock.YEAR_PATTERN).
    ok = LOW.year <= int(text[:4]) < HIGH.year
    with TestClient(value_app, raise_server_exceptions=False) as c:
        r = c.post("/v1/forecasts", json={"text": "Magnolias", "account": "loomhaven", "planned_at": text})
    assert r.status_code < 500, r.text
    if r.status_code >= 400:
        ErrorBody.model_validate(r.json())
    if not ok:
        assert r.status_code == 422 and "accepted range" in r.json()["error"]["message"], r.text
    else:
        assert "accepted range" not in r.text
