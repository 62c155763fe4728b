"""One registry of errors: each class states its HTTP status and code, the API
answers with them, the OpenAPI schema declares them, and the client raises the
same class back."""

from __future__ import annotations

from fastapi import FastAPI
from fastapi.testclient import TestClient

from models.errors import (
    ERROR_CLASSES,
    AuthError,
    CSVFormatError,
    InputError,
    LimitExceeded,
    NotFittedError,
    NotFound,
    NotReady,
    ServiceUnavailable,
    SoundingError,
    StoreError,
    TimeParseError,
    error_class,
)
from service.api import errors
from service.api.responses import ERRORS
from service.client import error_from

# RFC 9110 (HTTP semantics) and RFC 4918 section 11.2 (422), written out here:
# 401 Unauthorized, 404 Not Found, 409 Conflict (state not ready), 413 Content Too
# Large, 422 Unprocessable Content, 503 Service Unavailable.
RFC_STATUS = {
    AuthError: 401,
    NotFound: 404,
    NotReady: 409,
    NotFittedError: 409,
    LimitExceeded: 413,
    InputError: 422,
    CSVFormatError: 422,
    TimeParseError: 422,
    StoreError: 503,
    ServiceUnavailable: 503,
}


def _instance(cls: type[SoundingError]) -> SoundingError:
    if issubclass(cls, LimitExceeded):
        return cls("too many", limit="max_batch", maximum=7, field="drafts", where="request")
    return cls(f"a {cls.__name__} happened", field="f", where="w", hint="h")


def test_every_class_has_its_status_and_a_unique_code() -> None:
    for cls, status in RFC_STATUS.items():
        assert cls.status == status, cls
        assert ERROR_CLASSES[cls.code] is cls
    assert len(ERROR_CLASSES) == len({c.code for c in ERROR_CLASSES.values()})
    # A code the API makes for requests the framework refused maps by status.
    assert error_class("invalid_request", 422) is InputError
    assert error_class("method_not_allowed", 405) is SoundingError


def test_handler_answers_and_client_raises_the_same_class() -> None:
    app = FastAPI()
    errors.install(app)

    @app.get("/boom/{code}")
    def boom(code: str) -> None:
        raise _instance(ERROR_CLASSES[code])

    client = TestClient(app)
    for code, cls in ERROR_CLASSES.items():
        r = client.get(f"/boom/{code}")
        assert r.status_code == cls.status, code
        body = r.json()
        assert body["error"]["code"] == code
        back = error_from(r.status_code, body)
        assert type(back) is cls, code  # a CSV error comes back as a CSV error
        sent = _instance(cls)
        assert (back.message, back.field, back.where) == (sent.message, sent.field, sent.where)
        if isinstance(back, LimitExceeded):
            assert (back.limit, back.maximum) == ("max_batch", 7)
    assert client.get("/boom/unauthorized").headers["www-authenticate"] == "Bearer"


def test_openapi_declarations_come_from_the_classes() -> None:
    declared = ERRORS(NotFound, LimitExceeded, InputError)
    assert sorted(declared) == [404, 413, 422]
    assert declared[413]["description"] == LimitExceeded.description
    assert ERRORS(409) == ERRORS(NotReady)  # a bare status still reads the registry
