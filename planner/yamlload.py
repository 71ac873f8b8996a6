"""The document-loading API under its old name, so importers need not know how it is split.

Reading and parsing live in `document` (size limit, decoding, locations), `yamlparse` and
`jsonparse`; schema checks in `schemacheck`; `Problem` and its words in `problem`.
"""

from __future__ import annotations

from .document import Document, parse_document, read_file
from .problem import PathPart as PathPart
from .problem import Problem, closest, format_path, kind_of
from .schemacheck import check_schema, flow, load_schema
from .yamlparse import _Builder as _Builder
from .yamlparse import parse_yaml as _parse_yaml  # noqa: F401 - its old name, read by tests
from .yamlparse import plain_scalar

__all__ = [
    "Problem",
    "Document",
    "read_file",
    "parse_document",
    "format_path",
    "closest",
    "kind_of",
    "plain_scalar",
    "check_schema",
    "load_schema",
    "flow",
]
