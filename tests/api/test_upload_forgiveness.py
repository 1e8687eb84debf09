"""Uploads as spreadsheet software saves them: other column names, delimiters and encodings.

Each case is read, or refused with a problem that spells out the fix (never a bare 422).
"""

from __future__ import annotations

from urllib.parse import parse_qsl

import pytest

from tests.api.test_graphs import make_graph, upload
from tests.api.test_uploads import assert_problem, versions

pytestmark = pytest.mark.anyio


# -- header hints ---------------------------------------------------------------------


async def test_from_to_interactions_header_gets_a_ready_query(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    body = "From,To,Interactions\nann,bob,3\nbob,cy,1\n"
    problem = await assert_problem(await upload(client, gid, body), 422, "invalid-upload")
    query = "source=From&target=To&weight=Interactions"
    assert problem["hint"] == {
        "header": ["From", "To", "Interactions"],
        "columns": {"source": "From", "target": "To", "weight": "Interactions"},
        "query": query,
    }
    assert "?" + query in problem["detail"]
    assert problem["header"] == ["From", "To", "Interactions"]
    # The hint works as given.
    r = await upload(client, gid, body, **dict(parse_qsl(query)))
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["weighted"] is True and r.json()["edges"] == 2


async def test_hint_skips_other_columns_and_encodes_spaces(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    body = "Sender,Recipient,Total Calls,Notes\nann,bob,3,met twice\n"
    problem = await assert_problem(await upload(client, gid, body), 422, "invalid-upload")
    query = problem["hint"]["query"]
    assert query == "source=Sender&target=Recipient&weight=Total%20Calls&extra_columns=ignore"
    assert "Notes" in problem["detail"]
    r = await client.post(f"/v1/graphs/{gid}/versions?{query}", content=body, headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text


async def test_unknown_weight_column_is_mapped(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(
        await upload(client, gid, "source,target,Messages\na,b,4\n"), 422, "invalid-upload", column="Messages"
    )
    assert problem["hint"]["query"] == "weight=Messages"


async def test_only_an_extra_column_suggests_skipping_it(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(
        await upload(client, gid, "source,target,colour\na,b,red\n"), 422, "invalid-upload", column="colour"
    )
    assert problem["hint"]["query"] == "extra_columns=ignore"
    assert "The other column (colour) can be skipped: send the upload again with ?extra_columns=ignore" in problem["detail"]


async def test_header_without_known_names_gets_a_template(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(await upload(client, gid, "left,right\na,b\n"), 422, "invalid-upload")
    assert problem["hint"] == {"header": ["left", "right"], "columns": {}, "query": None}
    assert "?source=<column>&target=<column>" in problem["detail"]


async def test_node_file_id_column_hint(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    assert (await upload(client, gid, "source,target\nann,bob\n")).status_code == 201
    body = "Member ID,segment\nann,north\n"
    problem = await assert_problem(
        await upload(client, gid, body, part="nodes", mode="append"), 422, "invalid-upload"
    )
    assert problem["hint"]["query"] == "id=Member%20ID"
    r = await upload(client, gid, body, part="nodes", mode="append", id="Member ID")
    assert r.status_code == 201, r.text


# -- delimiters ------------------------------------------------------------------------


@pytest.mark.parametrize(
    "sep,name", [(";", "semicolon"), ("\t", "tab"), ("|", "pipe"), (",", "comma")]
)
async def test_delimiter_is_detected_and_reported(client, sep, name) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    body = "\n".join(sep.join(row) for row in [("source", "target", "weight"), ("a", "b", "2"), ("b", '"c, d"', "1")])
    r = await upload(client, gid, body + "\n")
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["delimiter"] == name
    assert r.json()["summary"]["encoding"] == "utf-8"
    assert (r.json()["nodes"], r.json()["edges"]) == (3, 2)


@pytest.mark.parametrize("given", ["semicolon", "Semicolon", ";"])
async def test_delimiter_parameter_overrides_detection(client, given) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    # One column "a,b" per side when split on semicolons; detection alone would pick the comma.
    body = "source;target\nx,1;y,2\n"
    r = await upload(client, gid, body, delimiter=given)
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["delimiter"] == "semicolon"
    node = await client.get(f"/v1/graphs/{gid}/nodes/x,1")
    assert node.status_code == 200, node.text


@pytest.mark.parametrize("given", ["tab", "\t", "\\t"])
async def test_tab_delimiter_spellings(client, given) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    r = await upload(client, gid, "source\ttarget\na\tb\n", delimiter=given)
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["delimiter"] == "tab"


async def test_unsupported_delimiter_is_a_problem(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(
        await upload(client, gid, "source:target\na:b\n", delimiter="colon"), 422, "invalid-parameter",
        field="delimiter",
    )
    assert "semicolon" in problem["detail"]
    assert await versions(client, gid) == []


# -- encodings -------------------------------------------------------------------------

NAMES = "source,target,weight\nZoë,Renée,2\nRenée,Jürgen,1\nJürgen,Zoë,4\n"


async def _node_exists(client, gid: str, node: str) -> bool:  # type: ignore[no-untyped-def]
    return (await client.get(f"/v1/graphs/{gid}/nodes/{node}")).status_code == 200


async def test_utf16_le_with_bom(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    body = b"\xff\xfe" + NAMES.replace("\n", "\r\n").replace(",", "\t").encode("utf-16-le")
    r = await upload(client, gid, body)
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["encoding"] == "utf-16le"
    assert r.json()["summary"]["delimiter"] == "tab"
    assert (r.json()["nodes"], r.json()["edges"]) == (3, 3)
    assert await _node_exists(client, gid, "Zoë") and await _node_exists(client, gid, "Jürgen")


async def test_windows_1252_with_charset(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    r = await upload(client, gid, NAMES.encode("cp1252"), "text/csv; charset=windows-1252")
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["encoding"] == "windows-1252"
    assert await _node_exists(client, gid, "Renée")


async def test_windows_1252_without_charset_names_the_fix(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(
        await upload(client, gid, NAMES.encode("cp1252")), 422, "invalid-encoding", likely_encoding="windows-1252"
    )
    assert "Windows-1252" in problem["detail"]
    assert "Content-Type: text/csv; charset=windows-1252" in problem["detail"]
    assert await versions(client, gid) == []


async def test_windows_1252_past_the_checked_prefix_is_named_with_its_line(client) -> None:  # type: ignore[no-untyped-def]
    # Plain ASCII for the first ~200 KB (more than the 64 KiB checked up front), then the
    # accented names a sorted export puts last.
    gid = await make_graph(client)
    head = "source,target\n" + "".join(f"a{i},b{i}\n" for i in range(20_000))
    tail = "".join(f"Zoë{i},Renée Müller{i}\n" for i in range(50))
    problem = await assert_problem(
        await upload(client, gid, (head + tail).encode("cp1252")), 422, "invalid-encoding",
        likely_encoding="windows-1252", line=20_002,
    )
    assert "charset=windows-1252" in problem["detail"] and "line 20002" in problem["detail"]
    r = await upload(client, gid, (head + tail).encode("cp1252"), "text/csv; charset=windows-1252")
    assert r.status_code == 201, r.text


async def test_utf16_without_bom_or_charset_is_named(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(
        await upload(client, gid, NAMES.encode("utf-16-le")), 422, "invalid-encoding", likely_encoding="utf-16le"
    )
    assert "charset=utf-16le" in problem["detail"]
    r = await upload(client, gid, NAMES.encode("utf-16-le"), "text/csv; charset=utf-16le")
    assert r.status_code == 201, r.text


async def test_utf8_with_bom(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    r = await upload(client, gid, b"\xef\xbb\xbf" + NAMES.encode("utf-8"))
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["encoding"] == "utf-8"
    assert await _node_exists(client, gid, "Zoë")


async def test_bom_wins_over_declared_charset(client) -> None:  # type: ignore[no-untyped-def]
    # Source: WHATWG Encoding Standard, "decode": a byte order mark overrides the label.
    gid = await make_graph(client)
    r = await upload(client, gid, b"\xef\xbb\xbf" + NAMES.encode("utf-8"), "text/csv; charset=windows-1252")
    assert r.status_code == 201, r.text
    assert await _node_exists(client, gid, "Zoë")


@pytest.mark.parametrize("charset", ["klingon-8", "base64", "rot13", "undefined"])
async def test_unknown_or_non_text_charset(client, charset) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(
        await upload(client, gid, b"source,target\na,b\n", f"text/csv; charset={charset}"), 422,
        "invalid-encoding", charset=charset,
    )
    assert charset in problem["detail"]


@pytest.mark.parametrize("charset", ["latin1", '"ISO-8859-1"', "UTF-16", "utf-8"])
async def test_charset_labels_are_matched_loosely(client, charset) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    body = NAMES.encode("utf-16" if "16" in charset else "utf-8" if charset == "utf-8" else "latin-1")
    r = await upload(client, gid, body, f"text/csv; charset={charset}")
    assert r.status_code == 201, r.text
    assert await _node_exists(client, gid, "Zoë")


async def test_bytes_outside_the_declared_charset(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    # 0x81 has no character in Windows-1252.
    body = "source,target\na,b\n".encode() + b"c\x81,d\n"
    await assert_problem(await upload(client, gid, body, "text/csv; charset=windows-1252"), 422, "invalid-upload",
                         line=3)


@pytest.mark.parametrize("magic", [b"PK\x03\x04\x14\x00\x06\x00", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1\x00\x00"])
async def test_a_workbook_sent_as_csv_is_named(client, magic) -> None:  # type: ignore[no-untyped-def]
    # Source: the zip local-file-header and OLE2 compound-file signatures (PKWARE APPNOTE 4.3.7;
    # MS-CFB 2.2) that .xlsx/.ods and .xls files start with.
    gid = await make_graph(client)
    problem = await assert_problem(await upload(client, gid, magic + bytes(range(256)) * 4), 422, "invalid-upload")
    assert "workbook" in problem["detail"] and "CSV UTF-8" in problem["detail"]


# -- warnings --------------------------------------------------------------------------


async def test_node_ids_without_edges_are_kept_and_listed(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    assert (await upload(client, gid, "source,target\nann,bob\n")).status_code == 201
    assert (await upload(client, gid, "source,target\nann,bob\n")).json()["warnings"] == []
    stray = [f"m{i:02d}" for i in range(25)]
    body = "id,consent\nann,yes\n" + "".join(f"{s},yes\n" for s in stray)
    r = await upload(client, gid, body, part="nodes", mode="append")
    assert r.status_code == 201, r.text
    assert r.json()["nodes"] == 27  # kept: attributes may arrive before their edges
    warning, consent = r.json()["warnings"]
    assert consent["code"] == "unknown_consent" and (consent["count"], consent["ids"]) == (1, ["bob"])
    assert warning["code"] == "ids_without_edges"
    assert warning["count"] == 25 and warning["ids"] == stray[:20]
    assert "25 people" in warning["message"]
    assert "warnings" not in r.json()["summary"]
    stored = (await client.get(f"/v1/graphs/{gid}/versions/3")).json()
    assert stored["warnings"] == [warning, consent]
    # Their contactability follows their consent, as for everyone.
    node = (await client.get(f"/v1/graphs/{gid}/nodes/m00")).json()
    assert node["attributes"]["contactable"] is True and node["degree"] == 0
