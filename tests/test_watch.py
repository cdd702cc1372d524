"""The watch (issue 31): alert files in a folder become notices for a prepared lens — a
first notice, an update on a sighting of another image, nothing for an alert at no image,
a retraction; the state survives a restart, a second watch on the folder is refused."""

import json
from pathlib import Path

import pytest
from astropy import units as u
from lxml import etree

from lensdelay.cli.main import main
from lensdelay.io.reading import load_scenario

ROOT = Path(__file__).parent.parent
SCHEMA = etree.XMLSchema(etree.parse(str(Path(__file__).parent / "data/voevent/VOEvent-v2.0.xsd")))


def _radec(sc, x, y):
    where = sc.sky.spherical_offsets_by(x * u.arcsec, y * u.arcsec)
    return float(where.ra.deg), float(where.dec.deg)


def _write_alerts(path, rows):
    path.write_text("".join(json.dumps(r) + "\n" for r in rows))


@pytest.fixture(scope="module")
def prepared(tmp_path_factory):
    lenses = tmp_path_factory.mktemp("lenses")
    steps = ["--steps", "200", "--walkers", "16", "--quiet"]
    scenario = str(ROOT / "scenarios" / "vellmar_quad.toml")
    assert main(["prepare", scenario, "--out", str(lenses / "vellmar"), *steps]) == 0
    return lenses, load_scenario(scenario)[0]


def test_alerts_become_notices_and_the_state_survives(prepared, tmp_path, capsys):
    lenses, sc = prepared
    images = {im.label: im for im in sc.families[0].images}
    alerts, out = tmp_path / "alerts", tmp_path / "out"
    alerts.mkdir()
    b = _radec(sc, images["B"].x, images["B"].y)
    far = _radec(sc, 0.0, 1.95)  # inside the footprint, at no image
    _write_alerts(
        alerts / "n1.jsonl",
        [
            {
                "alert_id": "a1",
                "ra": b[0],
                "dec": b[1],
                "mjd": 61372.2,
                "mag": 21.0,
                "band": "r",
                "object_id": "o1",
            },
            {
                "alert_id": "a2",
                "ra": far[0],
                "dec": far[1],
                "mjd": 61372.3,
                "mag": 22.5,
                "band": "r",
                "object_id": "o2",
            },
        ],
    )
    base = ["watch", str(lenses), "--alerts", str(alerts), "--out", str(out), "--once"]
    quick = ["--samples", "2000"]
    assert main([*base, *quick]) == 0
    log = capsys.readouterr().err
    first = out / "notices" / "vellmar" / "o1" / "001-first.json"
    assert first.exists() and "possible unknown image or a foreground transient" in log
    doc = json.loads(first.read_text())
    assert doc["match"]["image"] == "sn/B" and doc["role"] == "first"
    assert {im["image"] for im in doc["images"]} >= {"sn/A", "sn/B", "sn/C"}
    assert SCHEMA.validate(etree.parse(str(first.with_suffix(".xml"))))
    assert not (out / "notices" / "vellmar" / "o2").exists()
    # a restart reads nothing again and issues nothing again
    assert main([*base, *quick]) == 0
    log = capsys.readouterr().err
    assert "alerts read" not in log and "notice 1" not in log
    # a sighting of another image of o1: an update citing the first notice
    a = _radec(sc, images["A"].x, images["A"].y)
    _write_alerts(
        alerts / "n2.jsonl",
        [
            {
                "alert_id": "a3",
                "ra": a[0],
                "dec": a[1],
                "mjd": 61380.1,
                "mag": 21.4,
                "band": "r",
                "object_id": "o1",
            },
        ],
    )
    assert main([*base, *quick]) == 0
    update = json.loads((out / "notices" / "vellmar" / "o1" / "002-update.json").read_text())
    assert update["cites"] == [doc["ivorn"]] and update["match"]["image"] == "sn/A"
    # then o1 again, at no image: the match was wrong, a retraction of both
    _write_alerts(
        alerts / "n3.jsonl",
        [
            {
                "alert_id": "a4",
                "ra": far[0],
                "dec": far[1],
                "mjd": 61381.0,
                "mag": 22.0,
                "band": "r",
                "object_id": "o1",
            },
        ],
    )
    assert main([*base, *quick]) == 0
    retraction = out / "notices" / "vellmar" / "o1" / "003-retraction.json"
    assert json.loads(retraction.read_text())["cites"] == [doc["ivorn"], update["ivorn"]]
    assert SCHEMA.validate(etree.parse(str(retraction.with_suffix(".xml"))))


def test_bad_files_are_logged_and_the_watch_goes_on(prepared, tmp_path, capsys):
    lenses, _ = prepared
    alerts, out = tmp_path / "alerts", tmp_path / "out"
    alerts.mkdir()
    (alerts / "cut.avro").write_bytes(b"Obj\x01 truncated")
    _write_alerts(alerts / "bad.jsonl", [{"alert_id": "z", "dec": 1.0, "mjd": 1.0, "band": "r"}])
    assert main(["watch", str(lenses), "--alerts", str(alerts), "--out", str(out), "--once"]) == 0
    log = capsys.readouterr().err
    assert "cut.avro: unreadable, skipped" in log and "ra ('ra') is required" in log


def test_one_watch_per_folder(prepared, tmp_path, capsys):
    from lensdelay.io.watch_state import WatchState

    lenses, _ = prepared
    (tmp_path / "alerts").mkdir()
    held = WatchState(tmp_path / "out")
    try:
        code = main(
            [
                "watch",
                str(lenses),
                "--alerts",
                str(tmp_path / "alerts"),
                "--out",
                str(tmp_path / "out"),
                "--once",
            ]
        )
    finally:
        held.close()
    assert code == 2 and "in use by another watch" in capsys.readouterr().err


@pytest.mark.parametrize(
    "content, message",
    [("{not json", "--fields must be a readable JSON file"), ('{"colour": "c"}', "got 'colour'")],
)
def test_bad_field_mapping_is_one_line(prepared, tmp_path, capsys, content, message):
    lenses, _ = prepared
    (tmp_path / "alerts").mkdir()
    (tmp_path / "fields.json").write_text(content)
    code = main(
        [
            "watch",
            str(lenses),
            "--alerts",
            str(tmp_path / "alerts"),
            "--out",
            str(tmp_path / "out"),
            "--fields",
            str(tmp_path / "fields.json"),
            "--once",
        ]
    )
    err = capsys.readouterr().err.strip()
    assert code == 2 and message in err and "\n" not in err
    assert not (tmp_path / "out").exists()


def test_sigterm_ends_the_watch_cleanly_and_nothing_is_lost(prepared, tmp_path):
    """SIGTERM to a polling watch: it stops after the alert in hand, exit 0, its notice and
    state kept; a restart reads no file again and issues nothing again."""
    import signal
    import subprocess
    import sys
    import time

    lenses, sc = prepared
    images = {im.label: im for im in sc.families[0].images}
    alerts, out = tmp_path / "alerts", tmp_path / "out"
    alerts.mkdir()
    b = _radec(sc, images["B"].x, images["B"].y)
    _write_alerts(
        alerts / "n1.jsonl",
        [
            {
                "alert_id": "s1",
                "ra": b[0],
                "dec": b[1],
                "mjd": 61372.2,
                "mag": 21.0,
                "band": "r",
                "object_id": "t1",
            },
        ],
    )
    command = [
        sys.executable,
        "-m",
        "lensdelay",
        "watch",
        str(lenses),
        "--alerts",
        str(alerts),
        "--out",
        str(out),
        "--interval",
        "0.2",
        "--samples",
        "2000",
    ]
    watch = subprocess.Popen(command, stderr=subprocess.PIPE, text=True)
    notice = out / "notices" / "vellmar" / "t1" / "001-first.json"
    deadline = time.monotonic() + 60
    while not notice.exists() and time.monotonic() < deadline and watch.poll() is None:
        time.sleep(0.1)
    time.sleep(0.5)  # the file marked read, the watch back to polling
    watch.send_signal(signal.SIGTERM)
    _, err = watch.communicate(timeout=30)
    assert watch.returncode == 0, err
    assert notice.exists() and "state in" in err
    again = subprocess.run([*command, "--once"], capture_output=True, text=True, timeout=60)
    assert again.returncode == 0 and "alerts read" not in again.stderr
    assert sorted(p.name for p in notice.parent.glob("*.json")) == [
        "001-first-forecast.json",
        "001-first.json",
    ]
