"""A small typed client of the sounding HTTP API, for scheduling scripts.

    from service.client import SoundingClient

    with SoundingClient(base_url="http://127.0.0.1:8000") as client:
        f = client.forecast("Our magnolias are out", account="loomhaven",
                            planned_at="2026-12-03T12:30:00")
        if f.repeats or f.median < 1000:
            ...  # hold it back

Answers are the API's own pydantic schemas (``service.api.schemas``), so a
script gets attributes and types rather than loose dictionaries. Errors
come back as the very class the service raised (``models.errors``, looked
up by the body's ``code``), carrying the API's message; a service that
cannot be reached -> ServiceUnavailable (a StoreError).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import date, datetime
from types import TracebackType
from typing import Any, TypeVar
from urllib.parse import quote

import httpx
from pydantic import BaseModel, TypeAdapter, ValidationError

from models.errors import ServiceUnavailable, SoundingError, error_class
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC
from service.api.schemas import (
    AccountChoice,
    AccountInfo,
    DraftIn,
    Forecast,
    Forecasts,
    Health,
    HoursReport,
    TeamOverview,
    VariantsReport,
)

M = TypeVar("M", bound=BaseModel)
_ACCOUNTS = TypeAdapter(list[AccountInfo])
DraftLike = Mapping[str, Any] | DraftIn


def error_from(status: int, body: Any) -> SoundingError:
    """The library exception for an API error answer ``{"error": {...}}``:
    the class named by its code, or by its status when the code is not ours."""
    err = body.get("error") if isinstance(body, dict) else None
    if not isinstance(err, dict):
        err = {}
    if not err.get("message"):
        err = {**err, "message": f"the service answered HTTP {status}"}
    return error_class(str(err.get("code") or ""), status).from_dict(err)


def _when(value: datetime | str | None) -> str | None:
    """A planned time as the API reads it: ISO 8601 (no offset = the account's zone)."""
    if value is None or isinstance(value, str):
        return value
    return value.isoformat()


class SoundingClient:
    """Client of one sounding service.

    Parameters
    ----------
    base_url:
        Where the service listens (``sounding serve``).
    token:
        ``SOUNDING_TOKEN`` of the server; only needed for endpoints that
        change data. Sent as ``Authorization: Bearer <token>``.
    timeout:
        Seconds to wait for an answer.
    transport:
        An ``httpx`` transport, e.g. to talk to an app in the same process.
    """

    def __init__(
        self,
        *,
        base_url: str = "http://127.0.0.1:8000",
        token: str | None = None,
        timeout: float = 30.0,
        transport: httpx.BaseTransport | None = None,
    ) -> None:
        self.base_url = base_url.rstrip("/")
        headers = {"Accept": "application/json", "User-Agent": "sounding-client"}
        if token:
            headers["Authorization"] = f"Bearer {token}"
        self._http = httpx.Client(
            base_url=self.base_url, headers=headers, timeout=timeout, transport=transport
        )

    # Life cycle -------------------------------------------------------------

    def close(self) -> None:
        self._http.close()

    def __enter__(self) -> SoundingClient:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        self.close()

    # Endpoints --------------------------------------------------------------

    def health(self) -> Health:
        """Counts, embedding model and index state of the service."""
        return self._call("GET", "/v1/health", None, Health)

    def forecast(
        self,
        text: str,
        *,
        account: str,
        planned_at: datetime | str | None = None,
        metric: str = DEFAULT_METRIC,
        coverage: float = DEFAULT_COVERAGE,
        draft_id: str | None = None,
        has_media: bool = False,
        match: str = "meaning",
    ) -> Forecast:
        """Forecast one draft: interval, precedents, contributions and
        warnings (near-repeats are in ``warnings`` and ``repeats``, found by
        ``match``: meaning, words or both)."""
        body = {
            "text": text,
            "account": account,
            "planned_at": _when(planned_at),
            "metric": metric,
            "coverage": coverage,
            "draft_id": draft_id,
            "has_media": has_media,
            "match": match,
        }
        return self._call("POST", "/v1/forecasts", _drop_none(body), Forecast)

    def forecast_plan(
        self,
        drafts: Sequence[DraftLike],
        *,
        metric: str = DEFAULT_METRIC,
        coverage: float = DEFAULT_COVERAGE,
        match: str = "meaning",
    ) -> list[Forecast]:
        """Forecast several drafts in one request, in their order. Each draft
        is a ``DraftIn`` or a mapping with its fields (text, account,
        planned_at, draft_id, has_media); a planned_at may be a datetime."""
        items = []
        for d in drafts:
            raw = d.model_dump() if isinstance(d, DraftIn) else dict(d)
            raw["planned_at"] = _when(raw.get("planned_at"))
            items.append(_drop_none(raw))
        body = {"drafts": items, "metric": metric, "coverage": coverage, "match": match}
        return self._call("POST", "/v1/forecasts", body, Forecasts).forecasts

    def best_hours(
        self,
        text: str,
        *,
        account: str,
        day: date | str | None = None,
        week: bool = False,
        metric: str = DEFAULT_METRIC,
        coverage: float = DEFAULT_COVERAGE,
        top: int = 3,
        match: str = "meaning",
    ) -> HoursReport:
        """Forecast ``text`` at every hour of a local day (default tomorrow)
        or of seven days; says when the hours cannot be told apart (near-repeats,
        found by ``match``, are in ``warnings``)."""
        body = {
            "text": text,
            "account": account,
            "day": day.isoformat() if isinstance(day, date) else day,
            "week": week,
            "metric": metric,
            "coverage": coverage,
            "top": top,
            "match": match,
        }
        return self._call("POST", "/v1/hours", _drop_none(body), HoursReport)

    def compare(
        self,
        texts: Sequence[str],
        *,
        account: str,
        planned_at: datetime | str | None = None,
        metric: str = DEFAULT_METRIC,
        coverage: float = DEFAULT_COVERAGE,
        match: str = "meaning",
    ) -> VariantsReport:
        """Forecast several phrasings of one draft side by side, best first
        (each version's near-repeats, found by ``match``, in its warnings)."""
        body = {
            "texts": list(texts),
            "account": account,
            "planned_at": _when(planned_at),
            "metric": metric,
            "coverage": coverage,
            "match": match,
        }
        return self._call("POST", "/v1/comparisons", _drop_none(body), VariantsReport)

    def choose_account(
        self,
        text: str,
        *,
        accounts: Sequence[str] = ("all",),
        planned_at: datetime | str | None = None,
        has_media: bool = False,
        metric: str = DEFAULT_METRIC,
        coverage: float = DEFAULT_COVERAGE,
        match: str = "meaning",
    ) -> AccountChoice:
        """Which account should post it: the draft forecast for each, best first
        (never recorded; near-repeats, found by ``match``, in each one's warnings)."""
        body = {
            "text": text,
            "accounts": list(accounts),
            "planned_at": _when(planned_at),
            "has_media": has_media,
            "metric": metric,
            "coverage": coverage,
            "match": match,
        }
        return self._call("POST", "/v1/account-choices", _drop_none(body), AccountChoice)

    def accounts(self) -> list[AccountInfo]:
        """The store's accounts, each with its zone, posts and whether it is a peer's."""
        data = self._json("GET", "/v1/accounts", None)
        try:
            return _ACCOUNTS.validate_python(data)
        except ValidationError as exc:
            raise ServiceUnavailable(
                f"{self.base_url}/v1/accounts answered in an unexpected shape: {exc.errors()[0].get('msg')}"
            ) from None

    def change_account(
        self,
        handle: str,
        *,
        display_name: str | None = None,
        timezone: str | None = None,
        reference: bool | None = None,
        followers: int | None = None,
        since: datetime | str | None = None,
    ) -> AccountInfo:
        """Create an account, or change what is given of it (name, IANA zone,
        peer or team, a follower count as of ``since``); needs the token."""
        body = {
            "display_name": display_name,
            "timezone": timezone,
            "reference": reference,
            "followers": followers,
            "since": _when(since),
        }
        path = f"/v1/accounts/{quote(handle, safe='/')}"
        return self._call("PUT", path, _drop_none(body), AccountInfo)

    def team(self, *, metric: str = DEFAULT_METRIC) -> TeamOverview:
        """The team overview: each account's posts, share, median, trend, best hours, topics."""
        return self._call("GET", f"/v1/team?{httpx.QueryParams(metric=metric)}", None, TeamOverview)

    # Plumbing ---------------------------------------------------------------

    def _call(self, method: str, path: str, body: dict[str, Any] | None, model: type[M]) -> M:
        data = self._json(method, path, body)
        try:
            return model.model_validate(data)
        except ValidationError as exc:
            raise ServiceUnavailable(
                f"{self.base_url}{path} answered in an unexpected shape: {exc.errors()[0].get('msg')}"
            ) from None

    def _json(self, method: str, path: str, body: dict[str, Any] | None) -> Any:
        """The answer's JSON, or the library exception its error names."""
        try:
            resp = self._http.request(method, path, json=body)
        except httpx.TimeoutException as exc:
            raise ServiceUnavailable(
                f"no answer from {self.base_url} in time ({exc})",
                hint="is the service busy? raise the client's timeout",
            ) from None
        except httpx.HTTPError as exc:
            raise ServiceUnavailable(
                f"cannot reach the sounding service at {self.base_url}: {exc}",
                hint="start it with `sounding serve`",
            ) from None
        try:
            data = resp.json()
        except ValueError:
            data = None
        if resp.status_code >= 400:
            raise error_from(resp.status_code, data)
        if data is None:
            raise ServiceUnavailable(
                f"{self.base_url}{path} did not answer with JSON "
                f"(HTTP {resp.status_code}); is it a sounding service?"
            )
        return data


def _drop_none(d: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in d.items() if v is not None}
