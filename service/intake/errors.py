"""Errors raised while reading an upload. They carry data, not prose.

Each class carries its problem type as data (``slug``, the end of the
``/problems/...`` type, and ``title``); ``service/jobs/errors.problem_document``
builds the document, whose extension members are :meth:`UploadError.as_dict`, and
``api/problems.py`` adds the HTTP status (422).
"""

from __future__ import annotations

from typing import ClassVar, Literal

__all__ = [
    "IntakeError",
    "InvalidOption",
    "UploadError",
    "EmptyUpload",
    "MissingColumn",
    "UnknownColumn",
    "UnsafeXml",
    "TooDeep",
    "TooLong",
    "InvalidEncoding",
    "MAX_VALUE_CHARS",
]

MAX_VALUE_CHARS = 80

Unit = Literal["line", "record"]


class IntakeError(Exception):
    """The upload could not be read."""

    slug: ClassVar[str | None] = "invalid-upload"
    title: ClassVar[str | None] = "Upload could not be read"

    def __init__(self, reason: str | None = None) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        super().__init__(self.reason)


class InvalidOption(IntakeError):
    """A reader or merge option is not one of its allowed values."""

    slug = "invalid-parameter"
    title = "Invalid parameter"

    def __init__(self, reason: str | None = None, *, field: str | None = None) -> None:
        self.field = field
        super().__init__(reason)


class UploadError(IntakeError):
    """The uploaded file is malformed.

    Attributes
    ----------
    line : 1-based position of the failing input: the physical line for CSV,
        NDJSON and GraphML, the record number for a JSON array (``unit`` says
        which); None when the fault is not tied to one place.
    column : the column (CSV header name, JSON key, GraphML ``attr.name``).
    reason : what is wrong, in a few words.
    value : the offending text, cut to 80 characters.
    unit : ``"line"`` or ``"record"``.
    hint : how to fix it, as data (set by the caller that knows the options),
        e.g. ``{"header": [...], "query": "source=From&target=To"}``.
    """

    slug = "invalid-upload"
    title = "Upload could not be read"

    def __init__(
        self,
        reason: str | None = None,
        *,
        line: int | None = None,
        column: str | None = None,
        value: object = None,
        unit: Unit = "line",
    ) -> None:
        self.line = line
        self.column = column
        self.value = None if value is None else _cut(value)
        self.unit: Unit = unit
        self.hint: dict[str, object] | None = None
        super().__init__(reason)

    def __str__(self) -> str:
        where = []
        if self.line is not None:
            where.append(f"{self.unit} {self.line}")
        if self.column is not None:
            where.append(f"column {self.column!r}")
        text = (", ".join(where) + ": " if where else "") + self.reason
        if self.value is not None:
            text += f" (got {self.value!r})"
        return text

    def as_dict(self) -> dict[str, object]:
        """The error's data, for a problem document's extension members."""
        out: dict[str, object] = {
            "line": self.line,
            "column": self.column,
            "reason": self.reason,
            "value": self.value,
            "unit": self.unit,
        }
        if self.hint is not None:
            out["hint"] = self.hint
        return out


class EmptyUpload(UploadError):
    """The upload holds no records."""

    slug = "empty-upload"
    title = "Upload holds no records"


class MissingColumn(UploadError):
    """A required column is missing."""

    def __init__(
        self,
        reason: str | None = None,
        *,
        header: tuple[str, ...] = (),
        **kw: object,
    ) -> None:
        self.header = header
        super().__init__(reason, **kw)  # type: ignore[arg-type]

    def as_dict(self) -> dict[str, object]:
        return {**super().as_dict(), "header": list(self.header)}


class UnknownColumn(UploadError):
    """The upload has a column this part does not use."""

    def __init__(
        self,
        reason: str | None = None,
        *,
        header: tuple[str, ...] = (),
        **kw: object,
    ) -> None:
        self.header = header
        super().__init__(reason, **kw)  # type: ignore[arg-type]

    def as_dict(self) -> dict[str, object]:
        out = super().as_dict()
        if self.header:
            out["header"] = list(self.header)
        return out


class InvalidEncoding(UploadError):
    """The file's text encoding is not UTF-8 and was not declared."""

    slug = "invalid-encoding"
    title = "Text encoding not declared"

    def __init__(self, reason: str | None = None, *, likely: str | None = None,
                 charset: str | None = None, **kw: object) -> None:
        self.likely = likely
        self.charset = charset
        super().__init__(reason, **kw)  # type: ignore[arg-type]

    def as_dict(self) -> dict[str, object]:
        return {**super().as_dict(), "likely_encoding": self.likely, "charset": self.charset}


class UnsafeXml(UploadError):
    """GraphML with a DTD or entity declarations is refused."""

    slug = "unsafe-xml"
    title = "XML with DTD or entities refused"


class TooDeep(UploadError):
    """JSON nested deeper than the limit; refused before it is built."""

    def __init__(self, reason: str | None = None, *, depth: int, limit: int, **kw: object) -> None:
        self.depth, self.limit = depth, limit
        super().__init__(reason, **kw)  # type: ignore[arg-type]

    def as_dict(self) -> dict[str, object]:
        return {**super().as_dict(), "depth": self.depth, "limit": self.limit}


class TooLong(UploadError):
    """A node id, label, value or number longer than its limit."""

    def __init__(
        self, reason: str | None = None, *, length: int | None, limit: int, **kw: object
    ) -> None:
        self.length, self.limit = length, limit
        super().__init__(reason, **kw)  # type: ignore[arg-type]

    def as_dict(self) -> dict[str, object]:
        return {**super().as_dict(), "length": self.length, "limit": self.limit}


def _cut(value: object) -> str:
    text = value if isinstance(value, str) else repr(value)
    return text if len(text) <= MAX_VALUE_CHARS else text[: MAX_VALUE_CHARS - 1] + "\u2026"
