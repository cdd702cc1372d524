"""Notices (issue 31): the JSON notice round-trips and every role's VOEvent validates
against the IVOA VOEvent 2.0 schema (tests/data/voevent, with its source)."""

import json
from pathlib import Path

import pytest
from lxml import etree

from lensdelay.errors import InputError
from lensdelay.forecast.watchlist import Assignment
from lensdelay.io.notices import notice, voevent_xml
from lensdelay.model.alerts import Alert

SCHEMA = etree.XMLSchema(etree.parse(str(Path(__file__).parent / "data/voevent/VOEvent-v2.0.xsd")))
ALERT = Alert("a77", 187.3312, -12.4517, 61375.25, "r", mag=21.9, mag_err=0.08, object_id="o5")
MATCH = Assignment("vellmar", "sn/B", 0.97, {"sn/A": 0.01, "sn/B": 0.97, "none": 0.02}, (0.1, 0.2))
#: Two images as forecast.json records them (the fields the notice reads).
FORECAST = {
    "images": [
        {
            "family": "sn",
            "label": "B",
            "observed": True,
            "status": "seen",
            "ra_deg": 187.33118,
            "dec_deg": -12.45172,
            "position_error": [],
            "magnitude": {"median": 21.9},
            "date": {k: "2026-11-28T00:00:00Z" for k in ("median", "p16", "p84", "p2.5", "p97.5")},
            "archival_search": None,
        },
        {
            "family": "sn",
            "label": "A",
            "observed": True,
            "status": "future",
            "ra_deg": 187.33131,
            "dec_deg": -12.45178,
            "position_error": [],
            "magnitude": None,
            "date": {
                "median": "2026-12-20T05:00:00Z",
                "p16": "2026-12-18T00:00:00Z",
                "p84": "2026-12-22T00:00:00Z",
                "p2.5": "2026-12-15T00:00:00Z",
                "p97.5": "2026-12-26T00:00:00Z",
            },
            "archival_search": {"from": "2026-11-01T00:00:00Z", "to": "2026-11-20T00:00:00Z"},
        },
    ]
}


def _notices():
    first = notice(
        role="first",
        sequence=1,
        issued="2026-12-04T23:00:00Z",
        alert=ALERT,
        assignment=MATCH,
        forecast=FORECAST,
        transient="o5",
    )
    update = notice(
        role="update",
        sequence=2,
        issued="2026-12-05T01:00:00Z",
        alert=ALERT,
        assignment=MATCH,
        forecast=FORECAST,
        transient="o5",
        cites=[first["ivorn"]],
    )
    retraction = notice(
        role="retraction",
        sequence=3,
        issued="2026-12-05T02:00:00Z",
        alert=ALERT,
        assignment=MATCH,
        forecast=None,
        transient="o5",
        cites=[first["ivorn"], update["ivorn"]],
        reason="a later alert lies at none of the lens's images",
    )
    return first, update, retraction


@pytest.mark.parametrize("which", [0, 1, 2])
def test_every_role_validates_against_the_voevent_schema(which):
    doc = _notices()[which]
    xml = etree.fromstring(voevent_xml(doc))
    assert SCHEMA.validate(xml), SCHEMA.error_log
    assert xml.get("ivorn") == doc["ivorn"] and xml.get("version") == "2.0"
    cites = xml.findall("Citations/EventIVORN")
    assert [c.text for c in cites] == doc["cites"]
    if doc["role"] == "retraction":
        assert {c.get("cite") for c in cites} == {"retraction"}
    groups = {g.get("name"): g for g in xml.findall("What/Group")}
    assert set(groups) == {im["image"] for im in doc["images"]}


def test_json_notice_round_trips_and_carries_every_image():
    first = _notices()[0]
    assert json.loads(json.dumps(first)) == first
    a = next(im for im in first["images"] if im["image"] == "sn/A")
    assert a["window95"] == ["2026-12-15T00:00:00Z", "2026-12-26T00:00:00Z"]
    assert a["archival_search"]["to"] == "2026-11-20T00:00:00Z"
    assert first["match"]["image"] == "sn/B" and first["match"]["probability"] == 0.97
    xml = etree.fromstring(voevent_xml(first))
    ra = xml.find("WhereWhen/ObsDataLocation/ObservationLocation/AstroCoords/Position2D/Value2/C1")
    assert float(ra.text) == ALERT.ra


def test_an_update_without_what_it_follows_is_refused():
    with pytest.raises(InputError, match="cites must name the notices"):
        notice(
            role="update",
            sequence=2,
            issued="2026-12-05T01:00:00Z",
            alert=ALERT,
            assignment=MATCH,
            forecast=FORECAST,
            transient="o5",
        )
