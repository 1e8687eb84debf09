"""GraphML reader: edges and node attributes from one document.

Parsed with defusedxml's expat parser, which refuses any DTD, entity
declaration or external reference, so "billion laughs" and external-entity
files are refused before anything is expanded. The parser drives a small
event target instead of building a tree: memory holds one element at a time
(plus the output), and every event knows its line (expat's current line at
the element's start tag).
"""

from __future__ import annotations

from typing import BinaryIO, NamedTuple

from defusedxml import DefusedXmlException
from defusedxml.ElementTree import DefusedXMLParser, ParseError

from .errors import TooLong, UnsafeXml, UploadError
from .interner import Interner
from .limits import MAX_TOKEN_BYTES, SizeLimits
from ._records import EdgeRecords
from .tables import (
    DEFAULT_LIMITS,
    EdgeOptions,
    EdgeSink,
    EdgeTable,
    ExtraColumns,
    Fold,
    NodeSink,
    NodeTable,
    id_too_long,
)

__all__ = ["read_graphml", "GRAPHML_NS"]

GRAPHML_NS = "http://graphml.graphdrawing.org/xmlns"
READ_BYTES = 1 << 16


def read_graphml(
    fh: BinaryIO,
    interner: Interner,
    *,
    source: str = "source",
    target: str = "target",
    weight: str | None = None,
    probability: str | None = None,
    allow_self_loops: bool = False,
    extra_columns: ExtraColumns = "error",
    limits: SizeLimits | None = None,
    fold: Fold | None = None,
) -> tuple[EdgeTable, NodeTable]:
    """Read a GraphML document's edges and nodes.

    Parameters
    ----------
    fh : binary file object.
    interner : numbers node ids in document order; every declared ``<node>``
        is interned, so isolated nodes exist. Restored on error.
    source, target : accepted so every edge reader takes the same options;
        GraphML names the endpoints in ``<edge source=... target=...>``, so
        they are not used (errors name the columns ``source`` / ``target``).
    weight, probability : the ``attr.name`` of the edge keys holding weights
        and probabilities (default ``weight`` / ``probability`` when declared).
        A key's ``<default>`` applies to edges without that data.
    allow_self_loops : accept edges whose source equals their target.
    extra_columns : ``"error"`` refuses edge data under any other key name,
        ``"ignore"`` skips it. Data holding child elements (drawing
        information some editors write) is always skipped.
    limits, fold : as in :func:`service.intake.read_edges_csv`. An id
        attribute over the limit is refused at its tag; a tag or comment
        longer than :data:`~service.intake.limits.MAX_TOKEN_BYTES` is refused
        as soon as that much of it has arrived, before the XML parser reads
        it whole (its time grows with the square of a token's length).

    Returns
    -------
    (EdgeTable, NodeTable)
        The node table has one entry per declared node; node data under
        ``segment``, ``region``, ``consent``, ``cost``, ``value``, ``label``
        is parsed, other names land in ``extra``.

    Raises
    ------
    UnsafeXml
        The document has a DTD, an entity declaration or an external reference.
    UploadError
        With the line: malformed XML, not GraphML, hyperedges, nested graphs,
        a node or edge without its id/endpoints, and every value rule of
        :func:`service.intake.read_edges_csv`.

    Notes
    -----
    GraphML's ``edgedefault`` and per-edge ``directed`` are not read: the
    graph's direction is fixed when the graph is created.

    References
    ----------
    .. [1] U. Brandes, M. Eiglsperger, J. Lerner, C. Pich (2013). Graph Markup
       Language (GraphML). In Handbook of Graph Drawing and Visualization,
       CRC Press, 517-541.

    Examples
    --------
    >>> import io
    >>> doc = b'''<graphml xmlns="http://graphml.graphdrawing.org/xmlns">
    ...   <key id="w" for="edge" attr.name="weight" attr.type="double"/>
    ...   <key id="s" for="node" attr.name="segment" attr.type="string"/>
    ...   <graph edgedefault="undirected">
    ...     <node id="a"><data key="s">gold</data></node><node id="b"/><node id="c"/>
    ...     <edge source="a" target="b"><data key="w">3</data></edge>
    ...   </graph></graphml>'''
    >>> edges, nodes = read_graphml(io.BytesIO(doc), it := Interner())
    >>> it.ids, edges.weight.tolist(), nodes.segment
    (['a', 'b', 'c'], [3.0], ['gold', None, None])
    """
    del source, target
    opts = EdgeOptions("source", "target", weight, probability, allow_self_loops, extra_columns)
    n0 = len(interner)
    try:
        events = _Events(interner, opts, DEFAULT_LIMITS if limits is None else limits, fold)
        parser = DefusedXMLParser(
            target=events, forbid_dtd=True, forbid_entities=True, forbid_external=True
        )
        events.expat = parser.parser
        fed = 0
        try:
            while chunk := fh.read(READ_BYTES):
                parser.feed(chunk)
                fed += len(chunk)
                if fed - events.mark > MAX_TOKEN_BYTES:
                    events.token_too_long(fed - events.mark)
            parser.close()
        except DefusedXmlException as exc:
            raise UnsafeXml(
                f"{type(exc).__name__}: DTDs and entities are not accepted",
                line=events.line(),
            ) from None
        except ParseError as exc:
            raise UploadError(f"invalid XML: {exc.msg}", line=exc.position[0]) from None
        if not events.root_seen:
            raise UploadError("not a GraphML document (no graphml element)")
        events.edges.flush()
        return events.edges.sink.table(), events.nodes.table(allow_empty=True)
    except BaseException:
        interner.truncate(n0)
        raise


class _Key(NamedTuple):
    name: str
    domain: str  # node, edge, all, graph, ...
    default: str | None


class _Events:
    """Parser target: turns start/end/data events into node and edge records."""

    def __init__(
        self, interner: Interner, opts: EdgeOptions, limits: SizeLimits, fold: Fold | None
    ) -> None:
        self.interner = interner
        self.opts = opts
        self.limits = limits
        self.text_chars = max(limits.label_chars, limits.value_chars)  # longest <data> text
        self.expat: object = None
        self.mark = 0  # byte offset of the latest parser event
        self.nodes = NodeSink(interner, limits=limits)
        self.edges = EdgeRecords(EdgeSink(interner, opts, limits=limits, fold=fold), opts, "line")
        self.keys: dict[str, _Key] = {}
        self.stack: list[str] = []
        self.root_seen = False
        self.graphs = 0
        self.text: list[str] | None = None  # collecting <data>/<default> text
        self.text_len = 0
        self.text_depth = 0
        self.nested = False
        self.key: dict[str, str] | None = None
        self.key_default: str | None = None
        self.data_key: str | None = None
        self.data_line = 0
        self.item: str | None = None  # "node" or "edge" being read
        self.item_line = 0
        self.item_id = ""
        self.item_ends: tuple[str, str] = ("", "")
        self.values: dict[str, object] = {}

    def line(self) -> int | None:
        return getattr(self.expat, "CurrentLineNumber", None)

    def fail(self, reason: str, line: int | None = None, **kw: object) -> None:
        raise UploadError(reason, line=self.line() if line is None else line, **kw)  # type: ignore[arg-type]

    def _at(self) -> None:
        self.mark = getattr(self.expat, "CurrentByteIndex", 0) or self.mark

    def token_too_long(self, size: int) -> None:
        """A tag or comment has run past MAX_TOKEN_BYTES without an event: refuse it now."""
        raise TooLong(
            f"an XML tag or comment longer than {MAX_TOKEN_BYTES // 2**20} MiB: "
            f"node ids may be at most {self.limits.id_chars} characters and values "
            f"{self.limits.value_chars}",
            line=self.line(), length=size, limit=MAX_TOKEN_BYTES,
        )

    # -- parser target protocol

    def start(self, tag: str, attrib: dict[str, str]) -> None:
        self._at()
        name = tag.rpartition("}")[2]
        depth = len(self.stack)
        self.stack.append(name)
        if self.text is not None:
            self.nested = True  # markup inside <data>: drawing data, skipped
            return
        if not self.root_seen:
            if name != "graphml":
                self.fail(f"not a GraphML document (root element <{name}>)")
            self.root_seen = True
        elif name == "key" and depth == 1:
            self.key = dict(attrib)
            self.key_default = None
        elif name == "default" and self.key is not None:
            self._collect()
        elif name == "graph":
            if self.item is not None or depth != 1:
                self.fail("nested graphs are not supported")
            self.graphs += 1
            if self.graphs > 1:
                self.fail("one graph per GraphML document")
        elif name == "node":
            self._open("node", attrib)
        elif name == "edge":
            self._open("edge", attrib)
        elif name in ("hyperedge", "port"):
            self.fail(f"GraphML <{name}> is not supported")
        elif name == "data":
            # Graph-level data is read past (collected, then dropped).
            self.data_key = attrib.get("key", "") if self.item is not None else None
            self.data_line = self.line() or 0
            self._collect()

    def data(self, text: str) -> None:
        self._at()
        if self.text is not None and len(self.stack) == self.text_depth:
            self.text.append(text)
            self.text_len += len(text)
            if self.text_len > self.text_chars and not self.nested:
                raise TooLong(
                    f"value longer than {self.text_chars} characters: keep notes short, "
                    "or store long text elsewhere and upload a reference to it",
                    line=self.data_line or self.line(), column=self._key_name(self.data_key),
                    length=self.text_len, limit=self.text_chars,
                )

    def comment(self, text: str) -> None:
        self._at()

    def end(self, tag: str) -> None:
        self._at()
        depth = len(self.stack)
        name = self.stack.pop()
        if self.text is not None:
            if depth != self.text_depth:
                return
            text = None if self.nested else "".join(self.text)
            self.text = None
            if name == "default":
                self.key_default = text
            elif text is not None and self.data_key is not None:
                self._datum(self.data_key, text)
            self.data_key = None
            return
        if name == "key" and self.key is not None:
            kid = self.key.get("id", "")
            if not kid:
                self.fail("<key> without an id")
            domain = self.key.get("for", "all")
            self.keys[kid] = _Key(self.key.get("attr.name") or kid, domain, self.key_default)
            self.key = None
        elif name == self.item:
            self._close()

    def close(self) -> None:
        return None

    # -- helpers

    def _collect(self) -> None:
        self.text = []
        self.text_len = 0
        self.text_depth = len(self.stack)
        self.nested = False

    def _open(self, kind: str, attrib: dict[str, str]) -> None:
        if self.item is not None or self.graphs == 0:
            self.fail(f"<{kind}> outside a graph or inside another element")
        self.item = kind
        self.item_line = self.line() or 0
        self.values = {}
        if kind == "node":
            node_id = attrib.get("id", "")
            if not node_id:
                self.fail("<node> without an id", column="id")
            self._check_id(node_id, "id")
            self.item_id = node_id
            self.interner.intern(node_id)
        else:
            ends = (attrib.get("source", ""), attrib.get("target", ""))
            for col, end in zip(("source", "target"), ends):
                if not end:
                    self.fail(f"<edge> without a {col}", column=col)
                self._check_id(end, col)
                self.interner.intern(end)
            self.item_ends = ends

    def _key_name(self, key_id: str | None) -> str | None:
        key = self.keys.get(key_id or "")
        return key.name if key is not None else key_id

    def _check_id(self, node_id: str, column: str) -> None:
        limit = self.limits.id_chars
        if len(node_id) > limit:
            raise TooLong(id_too_long(limit), line=self.line(), column=column, value=node_id,
                          length=len(node_id), limit=limit)

    def _datum(self, key_id: str, text: str) -> None:
        key = self.keys.get(key_id)
        name = key.name if key is not None else key_id
        if self.item == "edge" and name in (self.opts.source, self.opts.target):
            self.fail(f"edge data may not be named {name!r}", line=self.data_line, column=name)
        if self.item == "node" and name == "id":
            name = "id_data"  # keep it, without shadowing the node's own id
        self.values[name] = text

    def _close(self) -> None:
        kind, self.item = self.item, None
        for key in self.keys.values():
            if key.domain in (kind, "all") and key.default is not None:
                self.values.setdefault(key.name, key.default)
        if kind == "node":
            self.nodes.add(self.item_id, self.values, self.item_line)
            return
        rec: dict[str, object] = dict(self.values)
        rec["source"], rec["target"] = self.item_ends
        if self.opts.extra_columns == "ignore":
            rec = {k: v for k, v in rec.items() if k in self.opts.known}
        self.edges.add(rec, self.item_line)

