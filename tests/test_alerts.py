"""Survey alert files (issue 31): every kind read, every bad record or file one line and
skipped, never an exception (a watch keeps running)."""

import io
import json

import fastavro
import pytest

from lensdelay.io.alert_files import read_alert_file
from lensdelay.model.alerts import AlertError, alert_from_record

#: An Avro schema with CONVENTIONS.md's default field names ("Survey alerts").
SCHEMA = {
    "type": "record",
    "name": "detection",
    "fields": [
        {"name": "alert_id", "type": "string"},
        {"name": "ra", "type": "double"},
        {"name": "dec", "type": "double"},
        {"name": "mjd", "type": "double"},
        {"name": "mag", "type": ["null", "double"], "default": None},
        {"name": "mag_err", "type": ["null", "double"], "default": None},
        {"name": "band", "type": "string"},
        {"name": "object_id", "type": ["null", "string"], "default": None},
    ],
}
RECORDS = [
    {
        "alert_id": "a1",
        "ra": 150.1,
        "dec": 2.2,
        "mjd": 61000.5,
        "mag": 22.1,
        "mag_err": 0.1,
        "band": "r",
        "object_id": "obj7",
    },
    {
        "alert_id": "a2",
        "ra": 359.99,
        "dec": -89.5,
        "mjd": 61000.6,
        "mag": 21.0,
        "mag_err": 0.05,
        "band": "g",
        "object_id": None,
    },
]


def _avro(path, records, schema=SCHEMA):
    with path.open("wb") as handle:
        fastavro.writer(handle, fastavro.parse_schema(schema), records)


def test_avro_csv_and_json_lines_give_the_same_alerts(tmp_path):
    _avro(tmp_path / "n.avro", RECORDS)
    (tmp_path / "n.jsonl").write_text("".join(json.dumps(r) + "\n" for r in RECORDS))
    header = list(RECORDS[0])
    lines = [",".join(header)] + [
        ",".join("" if r[k] is None else str(r[k]) for k in header) for r in RECORDS
    ]
    (tmp_path / "n.csv").write_text("\n".join(lines) + "\n")
    batches = [read_alert_file(tmp_path / f"n.{kind}") for kind in ("avro", "jsonl", "csv")]
    for batch in batches:
        assert not batch.problems and batch.records == 2
        assert batch.alerts == batches[0].alerts
    first = batches[0].alerts[0]
    assert (first.alert_id, first.ra, first.dec, first.band, first.object_id) == (
        "a1",
        150.1,
        2.2,
        "r",
        "obj7",
    )


def test_renamed_fields(tmp_path):
    renamed = [{"id": "x9", "alpha": 10.0, "delta": 5.0, "t": 61000.0, "m": 20.0, "f": "i"}]
    (tmp_path / "r.jsonl").write_text(json.dumps(renamed[0]) + "\n")
    fields = {"alert_id": "id", "ra": "alpha", "dec": "delta", "mjd": "t", "mag": "m", "band": "f"}
    batch = read_alert_file(tmp_path / "r.jsonl", fields)
    assert batch.alerts[0].ra == 10.0 and batch.alerts[0].mag == 20.0 and not batch.problems


def test_truncated_avro_is_one_line_and_skipped_whole(tmp_path):
    buffer = io.BytesIO()
    fastavro.writer(buffer, fastavro.parse_schema(SCHEMA), RECORDS * 50)
    data = buffer.getvalue()
    (tmp_path / "cut.avro").write_bytes(data[: len(data) * 2 // 3])
    batch = read_alert_file(tmp_path / "cut.avro")
    assert batch.alerts == () and len(batch.problems) == 1
    assert "cut.avro: unreadable, skipped" in batch.problems[0] and "\n" not in batch.problems[0]


def test_unknown_schema_and_missing_position_are_grouped_lines(tmp_path):
    other = {
        "type": "record",
        "name": "elsewhere",
        "fields": [{"name": "candid", "type": "long"}, {"name": "fwhm", "type": "double"}],
    }
    _avro(tmp_path / "other.avro", [{"candid": k, "fwhm": 1.0} for k in range(1000)], other)
    batch = read_alert_file(tmp_path / "other.avro")
    assert batch.alerts == () and batch.records == 1000
    assert batch.problems == (
        f"{tmp_path / 'other.avro'}: 1000 records skipped: alert_id ('alert_id') is required, "
        "got nothing",
    )
    no_position = [dict(RECORDS[0], ra=None), RECORDS[1]]
    (tmp_path / "p.jsonl").write_text(
        "".join(json.dumps(r) + "\n" for r in no_position) + "{not json\n"
    )
    batch = read_alert_file(tmp_path / "p.jsonl")
    assert [a.alert_id for a in batch.alerts] == ["a2"]
    assert any("ra ('ra') is required" in p for p in batch.problems)
    assert any("line 3 is not JSON" in p for p in batch.problems)


@pytest.mark.parametrize(
    "change, message",
    [
        ({"dec": 95.0}, "dec ('dec') must lie in [-90, 90]"),
        ({"mjd": "soon"}, "mjd ('mjd') must be a number"),
        ({"mag": None, "mag_err": None}, "mag ('mag') or flux ('flux'), got neither"),
        ({"band": ""}, "band ('band') is required"),
    ],
)
def test_bad_records_name_the_field(change, message):
    with pytest.raises(AlertError, match=__import__("re").escape(message)):
        alert_from_record(dict(RECORDS[0], **change))
