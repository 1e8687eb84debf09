"""Upload readers: CSV, NDJSON, JSON and GraphML bodies -> numpy arrays.

This package turns an uploaded file (a binary file object the HTTP layer
has spooled) into an :class:`EdgeTable` or :class:`NodeTable` over dense node
indices from an :class:`Interner`, refusing malformed input with an
:class:`UploadError` that names the line (or record) and column. ``merge``
folds duplicate edges by the declared rule and applies append/remove deltas
to a stored version's :class:`~service.analytics.graph.GraphArrays`.

Limits (:mod:`.limits`) bound what one upload may hold: ids, labels and
values in characters (settings of the service, passed in as
:class:`SizeLimits`), JSON nesting and number length, so a hostile body is
refused with its line instead of costing memory or time.

It imports the standard library, numpy, defusedxml, ijson, charset-normalizer and
``service.analytics.graph`` only: no HTTP, database or pydantic code.
"""

from __future__ import annotations

from .campaign_log import LOG_COLUMNS, LOG_ROLES, LogRow, read_campaign_log
from .csvfile import read_edges_csv, read_nodes_csv
from .dialect import (
    DELIMITER_NAMES,
    DELIMITER_SPELLINGS,
    DELIMITERS,
    CsvSource,
    delimiter_name,
    detect_delimiter,
    open_csv,
    parse_delimiter,
)
from .encoding import (
    LIKELY,
    PREFIX_BYTES,
    TextSource,
    charset_label,
    explain_not_utf8,
    guess_encoding,
    open_utf8,
)
from .errors import (
    MAX_VALUE_CHARS,
    EmptyUpload,
    IntakeError,
    InvalidEncoding,
    InvalidOption,
    MissingColumn,
    UnknownColumn,
    TooDeep,
    TooLong,
    UnsafeXml,
    UploadError,
)
from .events import EventColumns, EventRows, read_events_csv, read_events_json, read_events_ndjson
from .graphml import GRAPHML_NS, read_graphml
from .hints import EDGE_NAMES, NODE_NAMES, ColumnHint, normalise, suggest_columns
from .interner import MAX_NODES, Interner
from .limits import (
    MAX_DEPTH,
    MAX_LINE_BYTES,
    MAX_NUMBER_CHARS,
    MAX_RECORD_VALUES,
    MAX_TOKEN_BYTES,
    SizeLimits,
)
from .jsonfile import read_edges_json, read_edges_ndjson, read_nodes_json, read_nodes_ndjson
from .merge import (
    MERGE_RULES,
    DeltaStats,
    MergeRule,
    apply_edge_delta,
    merge_duplicates,
    merge_node_table,
    removal_mask,
    remove_nodes,
    select_node_attributes,
)
from .tables import CONSENT_WORDS, NODE_COLUMNS, EdgeOptions, EdgeTable, NodeTable

__all__ = [
    # campaign logs
    "LOG_COLUMNS",
    "LOG_ROLES",
    "LogRow",
    "read_campaign_log",
    # errors
    "IntakeError",
    "InvalidOption",
    "InvalidEncoding",
    "UploadError",
    "EmptyUpload",
    "MissingColumn",
    "UnknownColumn",
    "UnsafeXml",
    "TooDeep",
    "TooLong",
    "MAX_VALUE_CHARS",
    # limits
    "SizeLimits",
    "MAX_DEPTH",
    "MAX_NUMBER_CHARS",
    "MAX_RECORD_VALUES",
    "MAX_LINE_BYTES",
    "MAX_TOKEN_BYTES",
    # ids and tables
    "Interner",
    "MAX_NODES",
    "EdgeTable",
    "NodeTable",
    "EdgeOptions",
    "NODE_COLUMNS",
    "CONSENT_WORDS",
    # readers
    "read_edges_csv",
    "read_nodes_csv",
    "read_edges_ndjson",
    "read_edges_json",
    "read_nodes_ndjson",
    "read_nodes_json",
    "read_graphml",
    "EventColumns",
    "EventRows",
    "read_events_csv",
    "read_events_ndjson",
    "read_events_json",
    "GRAPHML_NS",
    # encodings, delimiters and column hints (CSV)
    "open_csv",
    "CsvSource",
    "parse_delimiter",
    "detect_delimiter",
    "delimiter_name",
    "DELIMITERS",
    "DELIMITER_SPELLINGS",
    "DELIMITER_NAMES",
    "open_utf8",
    "TextSource",
    "guess_encoding",
    "explain_not_utf8",
    "charset_label",
    "LIKELY",
    "PREFIX_BYTES",
    "suggest_columns",
    "ColumnHint",
    "normalise",
    "EDGE_NAMES",
    "NODE_NAMES",
    # merging
    "MergeRule",
    "MERGE_RULES",
    "DeltaStats",
    "merge_duplicates",
    "apply_edge_delta",
    "remove_nodes",
    "removal_mask",
    "select_node_attributes",
    "merge_node_table",
]
