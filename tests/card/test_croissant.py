"""croissant.json: Croissant 1.1 metadata of the split files.

References used:
- MLCommons Croissant 1.1 specification: the nine required dataset properties (@context, @type,
  conformsTo, name, description, license, url, creator, datePublished), FileObject with
  contentUrl/encodingFormat/sha256, RecordSet with typed fields (list from the spec, from memory
  and checked against the notes on the reference library).
- mlcroissant, the standard's reference library, as the validator (it loads records too, which
  checks the sha256 of the file it reads).
- hashlib SHA-256 of the files on disk.
"""

from __future__ import annotations

import copy
import hashlib
import json

import pytest

from prep.card.croissant import CONFORMS_TO, REQUIRED, build_croissant, data_type, missing_required


@pytest.fixture(scope="module")
def doc(demo_output):
    return json.loads((demo_output / "croissant.json").read_text(encoding="utf-8"))


def test_nine_required_properties_and_files(doc, demo_output):
    assert missing_required(doc) == []
    assert set(REQUIRED) <= set(doc)
    assert doc["@type"] == "sc:Dataset" and doc["conformsTo"] == CONFORMS_TO == "http://mlcommons.org/croissant/1.1"
    files = {f["contentUrl"]: f for f in doc["distribution"]}
    assert sorted(files) == ["test.parquet", "train.parquet", "validation.parquet"]
    for name, f in files.items():
        assert f["@type"] == "cr:FileObject" and f["encodingFormat"] == "application/x-parquet"
        assert f["sha256"] == hashlib.sha256((demo_output / name).read_bytes()).hexdigest()
    sets = {r["@id"]: r for r in doc["recordSet"]}
    assert sorted(sets) == ["test", "train", "validation"]
    types = {f["name"]: f["dataType"] for f in sets["train"]["field"]}
    assert types["source_row"] == "sc:Integer" and types["label"] == "sc:Text"


@pytest.mark.parametrize("key", REQUIRED)
def test_own_check_finds_each_missing_required_property(doc, key):
    broken = copy.deepcopy(doc)
    broken.pop(key)
    assert any(f"`{key}`" in p for p in missing_required(broken))


def test_own_check_finds_file_and_field_gaps(doc):
    broken = copy.deepcopy(doc)
    broken["distribution"][0].pop("sha256")
    broken["recordSet"][0]["field"][0].pop("dataType")
    problems = missing_required(broken)
    assert any("lacks `sha256`" in p for p in problems) and any("no `dataType`" in p for p in problems)


def test_reference_validator_accepts_it_and_loads_records(demo_output):
    mlc = pytest.importorskip("mlcroissant", reason="mlcroissant (the Croissant reference library) is in the test extra")
    dataset = mlc.Dataset(jsonld=str(demo_output / "croissant.json"))
    assert [r.name for r in dataset.metadata.record_sets] == ["train", "validation", "test"]
    first = next(iter(dataset.records("test")))
    assert set(first) >= {"test/row_id", "test/label"}


def test_reference_validator_rejects_a_broken_document(doc, tmp_path):
    mlc = pytest.importorskip("mlcroissant", reason="mlcroissant (the Croissant reference library) is in the test extra")
    broken = copy.deepcopy(doc)
    broken["recordSet"][0]["field"][0]["source"]["fileObject"]["@id"] = "no-such-file.parquet"
    path = tmp_path / "croissant.json"
    path.write_text(json.dumps(broken), encoding="utf-8")
    with pytest.raises(mlc.ValidationError):
        mlc.Dataset(jsonld=str(path))


def test_placeholders_when_the_pipeline_file_says_nothing(make_facts):
    from prep.card import build_card

    card = build_card(make_facts(about={}))
    built = build_croissant(card, date_published="2026-01-31")
    assert built["license"] == "not provided" and built["creator"]["name"] == "not provided"
    assert built["datePublished"] == "2026-01-31" and missing_required(built) == []


@pytest.mark.parametrize("polars_type, expected", [("String", "sc:Text"), ("Int64", "sc:Integer"), ("UInt32", "sc:Integer"),
                                                   ("Float64", "sc:Float"), ("Boolean", "sc:Boolean"),
                                                   ("Datetime(time_unit='us', time_zone=None)", "sc:DateTime")])
def test_data_types(polars_type, expected):
    assert data_type(polars_type) == expected
