"""Intake errors carry data; their text says what and where."""

from __future__ import annotations

from service.intake import (
    MAX_VALUE_CHARS,
    EmptyUpload,
    IntakeError,
    MissingColumn,
    UnknownColumn,
    UnsafeXml,
    UploadError,
)


def test_upload_error_data_and_text():
    err = UploadError("must be a positive number", line=17, column="weight", value="-3")
    assert (err.line, err.column, err.reason, err.value, err.unit) == (
        17, "weight", "must be a positive number", "-3", "line")
    assert str(err) == "line 17, column 'weight': must be a positive number (got '-3')"
    assert err.as_dict() == {"line": 17, "column": "weight", "reason": "must be a positive number",
                             "value": "-3", "unit": "line"}
    assert isinstance(err, IntakeError)


def test_record_unit_and_no_location():
    assert str(UploadError("bad", line=3, unit="record")) == "record 3: bad"
    assert str(UploadError("bad")) == "bad"


def test_value_is_cut_to_80_characters():
    err = UploadError("x", value="v" * 500)
    assert err.value is not None and len(err.value) == MAX_VALUE_CHARS == 80
    assert err.value.endswith("\u2026")
    assert UploadError("x", value="v" * 80).value == "v" * 80


def test_subclasses_default_message_is_their_docstring():
    assert EmptyUpload().reason == "The upload holds no records."
    assert UnsafeXml().reason.startswith("GraphML with a DTD")
    assert issubclass(UnknownColumn, UploadError) and issubclass(UnsafeXml, UploadError)


def test_missing_column_carries_the_header():
    err = MissingColumn("missing", line=1, column="target", header=("source", "dst"))
    assert err.header == ("source", "dst") and err.as_dict()["header"] == ["source", "dst"]
