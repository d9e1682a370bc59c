"""JSON Schemas (draft 2020-12) of the documents the auditor writes, shipped in auditor/schemas/.

``load_schema(name)`` returns a schema as a dictionary; ``validate(document, name)`` checks a
parsed document against it. Validation needs the optional ``jsonschema`` package (a test
extra), imported only when ``validate`` is called.
"""

from __future__ import annotations

import json
from functools import cache
from importlib import resources

#: schema name -> (file in auditor/schemas/, the tag a document carries)
SCHEMAS = {
    "report": ("report.schema.json", "auditor-report/1"),
    "item-error": ("item-error.schema.json", "auditor-item-error/1"),
    "pruned-basis": ("pruned-basis.schema.json", "auditor-pruned-basis/1"),
    "periodic-basis": ("periodic-basis.schema.json", "auditor-periodic-basis/1"),
    "scan": ("scan.schema.json", "auditor-scan/1"),
    "ladder": ("ladder.schema.json", "auditor-ladder/1"),
}

_BY_TAG = {tag: name for name, (_, tag) in SCHEMAS.items()}


def _resolve(name: str) -> str:
    """A schema name from a name ("report") or a document tag ("auditor-report/1")."""
    if name in SCHEMAS:
        return name
    if name in _BY_TAG:
        return _BY_TAG[name]
    known = ", ".join(sorted(SCHEMAS) + sorted(_BY_TAG))
    raise ValueError(f"no schema named {name!r}; known: {known}")


@cache
def _text(name: str) -> str:
    filename = SCHEMAS[name][0]
    return resources.files("auditor").joinpath("schemas").joinpath(filename).read_text(encoding="utf-8")


def load_schema(name: str) -> dict:
    """The schema ``name`` ("report", "item-error", "pruned-basis", "ladder", or a document tag such
    as "auditor-report/1") as a fresh dictionary."""
    return json.loads(_text(_resolve(name)))


def schema_name(document: dict) -> str:
    """Which schema a document claims: its ``schema`` (reports, item errors) or ``format``
    (pruned bases) tag."""
    tag = document.get("schema", document.get("format")) if isinstance(document, dict) else None
    if tag not in _BY_TAG:
        raise ValueError(f"not an auditor document (schema/format tag {tag!r})")
    return _BY_TAG[tag]


@cache
def _validator(name: str):
    try:
        import jsonschema
    except ImportError:
        raise ModuleNotFoundError(
            "validating auditor documents needs the jsonschema package: "
            "pip install 'jsonschema>=4' (it comes with the test extra, pip install -e '.[test]')"
        ) from None
    schema = load_schema(name)
    cls = jsonschema.validators.validator_for(schema)
    cls.check_schema(schema)
    return cls(schema)


def validate(document: dict, name: str | None = None) -> None:
    """Raise ``jsonschema.ValidationError`` (the most relevant error, with its path) unless
    ``document`` (parsed JSON) matches the schema ``name``; without ``name`` the
    document's own tag decides."""
    validator = _validator(_resolve(name) if name is not None else schema_name(document))
    from jsonschema.exceptions import best_match

    error = best_match(validator.iter_errors(document))
    if error is not None:
        raise error
