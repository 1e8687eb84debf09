"""GraphML reader: a valid document, unsafe XML refused, bad input with line numbers."""

from __future__ import annotations

import io

import networkx as nx
import numpy as np
import pytest

from service.intake import (
    EmptyUpload,
    Interner,
    UnknownColumn,
    UnsafeXml,
    UploadError,
    read_graphml,
)

HEAD = '<?xml version="1.0" encoding="UTF-8"?>\n<graphml xmlns="http://graphml.graphdrawing.org/xmlns">\n'


def doc(body: str, keys: str = "") -> bytes:
    return (HEAD + keys + '<graph id="G" edgedefault="undirected">\n' + body
            + "</graph>\n</graphml>\n").encode()


def read(data: bytes, interner: Interner | None = None, **kw: object):
    it = Interner() if interner is None else interner
    e, n = read_graphml(io.BytesIO(data), it, **kw)  # type: ignore[arg-type]
    return e, n, it


def fails(data: bytes, **kw: object) -> UploadError:
    with pytest.raises(UploadError) as info:
        read(data, **kw)
    return info.value


KEYS = """\
<key id="w" for="edge" attr.name="weight" attr.type="double"><default>1.5</default></key>
<key id="p" for="edge" attr.name="probability" attr.type="double"/>
<key id="seg" for="node" attr.name="segment" attr.type="string"/>
<key id="ok" for="node" attr.name="consent" attr.type="boolean"/>
<key id="c" for="node" attr.name="cost" attr.type="double"><default>0</default></key>
<key id="t" for="node" attr.name="team" attr.type="string"/>
"""

VALID = doc(
    """\
<node id="n0"><data key="seg">gold</data><data key="ok">true</data></node>
<node id="n1"><data key="c">2.5</data><data key="t">blue</data></node>
<node id="n2"/>
<node id="lonely"/>
<edge source="n0" target="n1"><data key="w">3</data><data key="p">0.5</data></edge>
<edge source="n1" target="n2"><data key="p">0.25</data></edge>
<edge source="n2" target="n3"><data key="p">1</data></edge>
""",
    KEYS,
)


def test_small_valid_document():
    e, n, it = read(VALID)
    # Declared nodes in document order; n3 is used by an edge without being declared.
    assert it.ids == ["n0", "n1", "n2", "lonely", "n3"]
    assert e.src.tolist() == [0, 1, 2] and e.dst.tolist() == [1, 2, 4]
    assert e.weight.tolist() == [3.0, 1.5, 1.5]  # the key's <default> fills in
    assert e.probability is not None and e.probability.tolist() == [0.5, 0.25, 1.0]
    assert e.records == 3
    assert n.index.tolist() == [0, 1, 2, 3]  # isolated "lonely" is a node too
    assert n.segment == ["gold", None, None, None]
    assert n.consent.tolist() == [1, -1, -1, -1]
    assert n.cost.tolist() == [0.0, 2.5, 0.0, 0.0]
    assert n.extra == {"team": [None, "blue", None, None]}
    assert set(n.columns) == {"segment", "consent", "cost"}


def test_agrees_with_networkx():
    # Source: NetworkX nx.read_graphml on the same document, computed in this test.
    g = nx.read_graphml(io.BytesIO(VALID))
    e, n, it = read(VALID)
    ours = {frozenset((it.ids[s], it.ids[d])): w
            for s, d, w in zip(e.src.tolist(), e.dst.tolist(), e.weight.tolist())}
    theirs = {frozenset((u, v)): d.get("weight", 1.5) for u, v, d in g.edges(data=True)}
    assert ours == theirs
    assert set(it.ids) == set(g.nodes)
    assert g.nodes["n0"]["segment"] == n.segment[0]


def test_without_namespace_and_without_keys():
    data = b'<graphml><graph><node id="a"/><edge source="a" target="b"/></graph></graphml>'
    e, n, it = read(data)
    assert it.ids == ["a", "b"] and e.weight.tolist() == [1.0] and e.probability is None
    assert n.index.tolist() == [0] and n.columns == ()


def test_unicode_ids():
    data = doc('<node id="Zoë"/><node id="李雷"/><edge source="Zoë" target="李雷"/>\n')
    _, _, it = read(data)
    assert it.ids == ["Zoë", "李雷"]


def test_drawing_data_with_markup_is_skipped():
    data = doc(
        '<node id="a"><data key="g"><y:ShapeNode xmlns:y="urn:y"><y:Fill/></y:ShapeNode>'
        '</data></node>\n<edge source="a" target="b"><data key="eg"><y:Line xmlns:y="urn:y"/>'
        "</data></edge>\n",
        '<key id="g" for="node" yfiles.type="nodegraphics"/>'
        '<key id="eg" for="edge" yfiles.type="edgegraphics"/>\n',
    )
    e, n, _ = read(data)
    assert e.records == 1 and n.extra == {}


def test_dtd_refused():
    data = (
        b'<?xml version="1.0"?>\n<!DOCTYPE graphml SYSTEM "graphml.dtd">\n'
        b'<graphml><graph><edge source="a" target="b"/></graph></graphml>'
    )
    err = fails(data)
    assert isinstance(err, UnsafeXml) and err.line == 2


def test_billion_laughs_refused_not_expanded():
    # Source: the classic "billion laughs" entity bomb (10 levels x 10 copies = 10^9
    # "lol"s); refused at the DTD before any expansion.
    ents = ['<!ENTITY lol "lol">'] + [
        f'<!ENTITY lol{i} "{("&lol" + (str(i - 1) if i > 1 else "") + ";") * 10}">'
        for i in range(1, 10)
    ]
    data = (
        '<?xml version="1.0"?>\n<!DOCTYPE lolz [\n' + "\n".join(ents) + "\n]>\n"
        '<graphml><graph><node id="&lol9;"/><edge source="&lol9;" target="b"/></graph></graphml>'
    ).encode()
    it = Interner()
    with pytest.raises(UnsafeXml):
        read(data, it)
    assert len(it) == 0


def test_external_entity_refused():
    data = (
        b'<?xml version="1.0"?>\n<!DOCTYPE g [<!ENTITY x SYSTEM "file:///etc/passwd">]>\n'
        b'<graphml><graph><node id="&x;"/></graph></graphml>'
    )
    assert isinstance(fails(data), UnsafeXml)


@pytest.mark.parametrize(
    ("body", "line", "reason"),
    [
        ('<node id="a"/>\n<edge source="a" target="a"/>\n', 7, "self-loop"),
        ('<node id="a"/>\n<edge source="a"/>\n', 7, "without a target"),
        ('<node/>\n', 6, "without an id"),
        ('<node id="a"/>\n<hyperedge><endpoint node="a"/></hyperedge>\n', 7, "hyperedge"),
        ('<node id="a"><graph/></node>\n', 6, "nested graphs"),
        ('<edge source="a" target="b"><data key="w">-1</data></edge>\n', 6, "positive number"),
        ('<edge source="a" target="b"><data key="w">abc</data></edge>\n', 6, "positive number"),
        ('<node id="a"/>\n\n<edge source="a" target="b"><data key="c">x</data></edge>\n', 8,
         "unknown column"),
    ],
)
def test_bad_documents_name_the_line(body, line, reason):
    keys = ('<key id="w" for="edge" attr.name="weight"/>\n'
            '<key id="c" for="edge" attr.name="colour"/>\n')
    data = (HEAD + keys + '<graph edgedefault="directed">\n' + body + "</graph></graphml>").encode()
    # Lines 1-2 are HEAD, 3-4 the keys, 5 the graph tag: the body starts on line 6.
    err = fails(data)
    assert reason in err.reason
    assert err.line == line


def test_unknown_edge_data_can_be_ignored():
    data = doc('<edge source="a" target="b"><data key="c">red</data></edge>\n',
               '<key id="c" for="edge" attr.name="colour"/>\n')
    e, _, _ = read(data, extra_columns="ignore")
    assert e.records == 1
    assert isinstance(fails(data), UnknownColumn)


def test_weight_key_mapping():
    data = doc('<edge source="a" target="b"><data key="k">4</data></edge>\n',
               '<key id="k" for="edge" attr.name="calls"/>\n')
    e, _, _ = read(data, weight="calls")
    assert e.weight.tolist() == [4.0]


def test_bad_node_attribute_line():
    data = doc('<node id="a"/>\n<node id="b"><data key="ok">maybe</data></node>\n',
               '<key id="ok" for="node" attr.name="consent"/>\n')
    err = fails(data)
    assert (err.line, err.column) == (6, "consent")  # lines: decl, graphml, key, graph, a, b


def test_malformed_xml_line():
    err = fails(HEAD.encode() + b"<graph>\n<node id='a'>\n</edge>\n")
    assert err.line == 5 and "invalid XML" in err.reason


def test_not_graphml():
    assert "not a GraphML" in fails(b"<gexf><graph/></gexf>").reason
    assert "invalid XML" in fails(b"").reason


def test_no_edges_is_empty():
    with pytest.raises(EmptyUpload):
        read(doc('<node id="a"/>\n'))


def test_failure_restores_interner():
    it = Interner.from_ids(["x"])
    with pytest.raises(UploadError):
        read(doc('<node id="a"/><edge source="a" target="a"/>\n'), it)
    assert it.ids == ["x"]


def test_nodes_repeat_last_wins():
    data = doc('<node id="a"><data key="c">1</data></node><node id="a"><data key="c">2</data>'
               '</node><edge source="a" target="b"/>\n',
               '<key id="c" for="node" attr.name="cost"/>\n')
    _, n, _ = read(data)
    assert n.index.tolist() == [0] and n.records == 2
    np.testing.assert_array_equal(n.cost, [2.0])
