"""Croissant 1.1 metadata (``croissant.json``) for the split files, built from the card.

Croissant is the MLCommons open standard for describing machine-learning datasets in JSON-LD
on top of schema.org. This module writes what the standard requires of a dataset and what a
reader needs to load the splits:

- the nine required dataset properties: ``@context``, ``@type`` (``sc:Dataset``),
  ``conformsTo`` (``http://mlcommons.org/croissant/1.1``), ``name``, ``description``,
  ``license``, ``url``, ``creator``, ``datePublished``;
- one ``cr:FileObject`` per split file with ``contentUrl`` (relative to ``croissant.json``),
  ``encodingFormat`` and ``sha256``;
- one ``cr:RecordSet`` per split whose ``cr:Field`` s carry a ``dataType`` and read their
  column from that split's file.

The ``@context`` is written inline (the standard's 1.1 context, as its reference library
``mlcroissant`` 1.1 builds it; from that library), so a validator needs no network.

What prep cannot know is filled honestly: ``license`` and ``creator`` come from the pipeline
file's ``about`` (``license``, ``maintainer``) and read "not provided" when absent; ``url`` is
the relative reference ``"."`` (the folder that holds the files), since the dataset has no
address of its own until someone publishes it; ``datePublished`` is the day of the run (UTC),
taken from the run's start time in ``manifest.json``, so ``croissant.json`` is, like the
manifest, the same bytes only for runs on the same day.

:func:`missing_required` checks the required properties itself, because the reference
validator accepts documents without some of them.
"""

from __future__ import annotations

import re
from typing import Any

CONFORMS_TO = "http://mlcommons.org/croissant/1.1"

#: The nine dataset properties Croissant 1.1 requires (spec, "Dataset-level information").
REQUIRED = ("@context", "@type", "conformsTo", "name", "description", "license", "url", "creator", "datePublished")

#: Media type used for Parquet files in the Croissant examples (no IANA registration exists).
PARQUET_MEDIA_TYPE = "application/x-parquet"

NOT_PROVIDED = "not provided"

CONTEXT: dict[str, Any] = {
    "@language": "en",
    "@vocab": "https://schema.org/",
    "arrayShape": "cr:arrayShape",
    "citeAs": "cr:citeAs",
    "column": "cr:column",
    "conformsTo": "dct:conformsTo",
    "containedIn": "cr:containedIn",
    "cr": "http://mlcommons.org/croissant/",
    "rai": "http://mlcommons.org/croissant/RAI/",
    "data": {"@id": "cr:data", "@type": "@json"},
    "dataType": {"@id": "cr:dataType", "@type": "@vocab"},
    "dct": "http://purl.org/dc/terms/",
    "equivalentProperty": "cr:equivalentProperty",
    "examples": {"@id": "cr:examples", "@type": "@json"},
    "extract": "cr:extract",
    "field": "cr:field",
    "fileProperty": "cr:fileProperty",
    "fileObject": "cr:fileObject",
    "fileSet": "cr:fileSet",
    "format": "cr:format",
    "includes": "cr:includes",
    "isArray": "cr:isArray",
    "isLiveDataset": "cr:isLiveDataset",
    "jsonPath": "cr:jsonPath",
    "key": "cr:key",
    "md5": "cr:md5",
    "parentField": "cr:parentField",
    "path": "cr:path",
    "recordSet": "cr:recordSet",
    "references": "cr:references",
    "regex": "cr:regex",
    "repeated": "cr:repeated",
    "replace": "cr:replace",
    "samplingRate": "cr:samplingRate",
    "sc": "https://schema.org/",
    "separator": "cr:separator",
    "source": "cr:source",
    "subField": "cr:subField",
    "transform": "cr:transform",
}

#: polars dtype name (as the card records it) -> schema.org data type.
DATA_TYPES = {
    "String": "sc:Text",
    "Utf8": "sc:Text",
    "Categorical": "sc:Text",
    "Enum": "sc:Text",
    "Boolean": "sc:Boolean",
    "Date": "sc:Date",
    "Float32": "sc:Float",
    "Float64": "sc:Float",
}
_INTEGER = re.compile(r"^U?Int(8|16|32|64|128)$")

_SPLITS = ("train", "validation", "test")


def data_type(polars_type: str) -> str:
    """schema.org data type for a polars dtype name; anything unknown is text."""
    if _INTEGER.match(polars_type):
        return "sc:Integer"
    if polars_type.startswith("Datetime"):
        return "sc:DateTime"
    return DATA_TYPES.get(polars_type, "sc:Text")


def build_croissant(card: dict[str, Any], *, date_published: str, sizes: dict[str, int] | None = None) -> dict[str, Any]:
    """The Croissant document for the split files described by ``card``.

    ``date_published`` is an ISO 8601 date (YYYY-MM-DD); ``sizes`` maps a file name to its size
    in bytes (written as ``contentSize`` when known).
    """
    about = card.get("about") or {}
    task = card.get("task") or {}
    files = card["splits"]["files"]
    distribution = []
    record_sets = []
    for split in _SPLITS:
        f = files.get(split)
        if f is None:
            continue
        file_id = f["file"]
        obj = {
            "@type": "cr:FileObject",
            "@id": file_id,
            "name": file_id,
            "description": f"The {split} split: {f['rows']} rows.",
            "contentUrl": file_id,
            "encodingFormat": PARQUET_MEDIA_TYPE,
            "sha256": f["sha256"],
        }
        if sizes and file_id in sizes:
            obj["contentSize"] = f"{sizes[file_id]} B"
        distribution.append(obj)
        fields = []
        for column in f["columns"]:
            fields.append(
                {
                    "@type": "cr:Field",
                    "@id": f"{split}/{column['name']}",
                    "name": column["name"],
                    "description": _column_description(column["name"], task),
                    "dataType": data_type(column["type"]),
                    "source": {"fileObject": {"@id": file_id}, "extract": {"column": column["name"]}},
                }
            )
        record_sets.append(
            {
                "@type": "cr:RecordSet",
                "@id": split,
                "name": split,
                "description": f"Rows of the {split} split, one record per ticket.",
                "field": fields,
            }
        )
    maintainer = about.get("maintainer")
    description = card.get("description") or (
        f"{card['dataset']}: train, validation and test splits for {task.get('kind', 'classification')}, written by prep."
    )
    return {
        "@context": dict(CONTEXT),
        "@type": "sc:Dataset",
        "conformsTo": CONFORMS_TO,
        "name": card["dataset"],
        "description": description,
        "license": about.get("license") or NOT_PROVIDED,
        "url": ".",
        "creator": {"@type": "sc:Organization", "name": maintainer or NOT_PROVIDED},
        "datePublished": date_published,
        "version": card["provenance"].get("tool_version", "0"),
        "isLiveDataset": False,
        "distribution": distribution,
        "recordSet": record_sets,
    }


def _column_description(name: str, task: dict) -> str:
    if name == task.get("label_column"):
        return "The label: the class of the ticket."
    if name in (task.get("text_columns") or []):
        return "A text column of the ticket."
    return {
        "row_id": "Stable row id: <source name>:<source_row>.",
        "source": "Name of the source the row was read from.",
        "source_row": "0-based index of the record in its source file, header excluded.",
    }.get(name, "A column of the ticket table.")


def missing_required(doc: dict[str, Any]) -> list[str]:
    """What ``doc`` lacks of Croissant 1.1's required dataset properties and of what prep promises
    for every file and record set; an empty list when nothing is missing."""
    problems = []
    for key in REQUIRED:
        value = doc.get(key)
        if value is None or value == "" or value == {} or value == []:
            problems.append(f"missing required property `{key}`")
    if doc.get("@type") not in ("sc:Dataset", "https://schema.org/Dataset"):
        problems.append("`@type` is not sc:Dataset")
    if doc.get("conformsTo") != CONFORMS_TO:
        problems.append(f"`conformsTo` is not {CONFORMS_TO}")
    if not isinstance(doc.get("@context"), dict):
        problems.append("`@context` is not inline")
    date = doc.get("datePublished")
    if isinstance(date, str) and not re.match(r"^\d{4}-\d{2}-\d{2}", date):
        problems.append("`datePublished` is not an ISO 8601 date")
    creator = doc.get("creator")
    if isinstance(creator, dict) and not creator.get("name"):
        problems.append("`creator` has no name")
    for obj in doc.get("distribution") or []:
        for key in ("contentUrl", "encodingFormat", "sha256"):
            if not obj.get(key):
                problems.append(f"file `{obj.get('@id', '?')}` lacks `{key}`")
        if obj.get("sha256") and not re.match(r"^[0-9a-f]{64}$", obj["sha256"]):
            problems.append(f"file `{obj.get('@id', '?')}` has a malformed `sha256`")
    if not doc.get("distribution"):
        problems.append("no FileObject in `distribution`")
    for rs in doc.get("recordSet") or []:
        for f in rs.get("field") or []:
            if not f.get("dataType"):
                problems.append(f"field `{f.get('@id', '?')}` has no `dataType`")
    return problems
