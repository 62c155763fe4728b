"""The one exception hierarchy of sounding.

Every error that a user can cause or meet in normal use is a subclass of
:class:`SoundingError`. The CLI turns these into one-line messages and the
HTTP API maps them to status codes in a single handler
(``service.api.errors``); anything else is a bug.

Each error carries context as attributes (``where``, ``field``, ``value``)
so callers can act on it without parsing the message. Each class states
its stable, machine-readable ``code`` (used in API error bodies) and the
HTTP ``status`` it answers with; ``ERROR_CLASSES`` is the one registry of
them, read by the API's error handler, its OpenAPI declarations and the
client (which raises the same class back from the code).

    SoundingError
    ├── InputError             bad input from the user (422)
    │   ├── CSVFormatError     the file is not readable as our CSV
    │   ├── TimeParseError     a time that cannot be read or does not exist
    │   └── LimitExceeded      past a configured size or count limit (413)
    ├── NotFound               an account, post, or artefact is missing (404)
    ├── NotReady               e.g. no model trained yet, too little history (409)
    ├── AuthError              missing or wrong bearer token (401)
    └── StoreError             the store or an artefact on disk is unusable (503)
        └── ServiceUnavailable the HTTP service cannot be reached (service.client)
"""

from __future__ import annotations

from typing import Any, ClassVar

#: code -> class of every SoundingError, filled as the classes are defined.
ERROR_CLASSES: dict[str, type[SoundingError]] = {}


class SoundingError(Exception):
    """Base class of every expected error in sounding."""

    code: ClassVar[str] = "error"
    status: ClassVar[int] = 400
    #: What the HTTP status means for this family, as the OpenAPI schema says it.
    description: ClassVar[str] = "Refused"

    def __init_subclass__(cls, **kw: Any) -> None:
        super().__init_subclass__(**kw)
        if "code" not in cls.__dict__:  # shares its parent's code (and class on the wire)
            return
        if cls.code in ERROR_CLASSES:
            raise TypeError(f"error code {cls.code!r} is used twice")
        ERROR_CLASSES[cls.code] = cls

    def __init__(
        self,
        message: str,
        *,
        where: str | None = None,
        field: str | None = None,
        value: Any = None,
        hint: str | None = None,
    ) -> None:
        super().__init__(message)
        self.message = message
        self.where = where
        self.field = field
        self.value = value
        self.hint = hint

    def __str__(self) -> str:
        parts = []
        if self.where:
            parts.append(f"{self.where}: ")
        parts.append(self.message)
        if self.hint:
            parts.append(f" ({self.hint})")
        return "".join(parts)

    def to_dict(self) -> dict[str, Any]:
        """The error as the body shape every API error shares."""
        out: dict[str, Any] = {"code": self.code, "message": self.message}
        if self.where is not None:
            out["where"] = self.where
        if self.field is not None:
            out["field"] = self.field
        if self.hint is not None:
            out["hint"] = self.hint
        return out

    @classmethod
    def from_dict(cls, body: dict[str, Any]) -> SoundingError:
        """The error again from its ``to_dict`` body (the client's side)."""
        return cls(
            str(body.get("message") or cls.description),
            where=body.get("where"),
            field=body.get("field"),
            hint=body.get("hint"),
        )


ERROR_CLASSES[SoundingError.code] = SoundingError


def error_class(code: str | None, status: int | None = None) -> type[SoundingError]:
    """The class of an error code; for a code we do not know (e.g. a request
    the web framework refused), the broadest class answering ``status``."""
    if code in ERROR_CLASSES:
        return ERROR_CLASSES[code]
    for cls in ERROR_CLASSES.values():  # in definition order: parents first
        if cls is not SoundingError and cls.status == status:
            return cls
    return SoundingError


class InputError(SoundingError):
    """Bad input: a value, a row, a request field."""

    code = "invalid_input"
    status = 422
    description = "Invalid input"


class CSVFormatError(InputError):
    """The file is not readable as a CSV of the expected shape."""

    code = "invalid_csv"


class TimeParseError(InputError):
    """A time that cannot be read, or a local time that does not exist."""

    code = "invalid_time"


class LimitExceeded(InputError):
    """Past a configured limit (draft length, batch size, upload size)."""

    code = "limit_exceeded"
    status = 413
    description = "Past a configured limit"

    def __init__(self, message: str, *, limit: str, maximum: int, **kw: Any) -> None:
        super().__init__(message, **kw)
        self.limit = limit
        self.maximum = maximum

    def to_dict(self) -> dict[str, Any]:
        out = super().to_dict()
        out["limit"] = self.limit
        out["maximum"] = self.maximum
        return out

    @classmethod
    def from_dict(cls, body: dict[str, Any]) -> SoundingError:
        maximum = body.get("maximum")
        return cls(
            str(body.get("message") or cls.description),
            limit=str(body.get("limit") or ""),
            maximum=maximum if isinstance(maximum, int) else 0,
            where=body.get("where"),
            field=body.get("field"),
            hint=body.get("hint"),
        )


class NotFound(SoundingError):
    """An account, post, model or other named thing does not exist."""

    code = "not_found"
    status = 404
    description = "Unknown account, post or resource"


class NotReady(SoundingError):
    """The operation needs something that is not there yet (a trained model,
    enough history, a fitted estimator)."""

    code = "not_ready"
    status = 409
    description = "Not ready: no model trained yet, or too little history"


class NotFittedError(NotReady, ValueError):
    """An estimator was used before ``fit``. Also a ValueError, as in
    scikit-learn, so generic callers can catch it."""

    code = "not_fitted"


class AuthError(SoundingError):
    """Missing or wrong bearer token."""

    code = "unauthorized"
    status = 401
    description = "Missing or wrong bearer token"


class StoreError(SoundingError):
    """The store or an artefact on disk cannot be used."""

    code = "store_error"
    status = 503
    description = "The store is unavailable"


class ServiceUnavailable(StoreError):
    """The sounding service cannot be reached (service.client: refused
    connection, timeout, an answer that is not the API's)."""

    code = "service_unavailable"


class Busy(NotReady):
    """Another import, forget or training run is changing the same data
    directory, and it did not finish within the wait (409)."""

    code = "busy"


class ReadOnly(StoreError):
    """The data directory cannot be written: reads work, changes are refused (503)."""

    code = "read_only"
