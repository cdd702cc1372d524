"""Member galaxies from a table (issue 13): parsing, scaling with luminosity, bad input."""

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord

from lensdelay.cli.main import main
from lensdelay.io.reading import load_scenario
from lensdelay.lensing.profiles import TruncatedIsothermal

pytestmark = pytest.mark.integration

SCENARIO = """
name = "Members test"
[lens]
redshift = 0.4
[sky]
ra = 150.0
dec = -20.0
[[family]]
label = "s"
redshift = 1.5
[[family.image]]
label = "A"
x = 1.1
y = 0.3
sigma = 0.003
[[family.image]]
label = "B"
x = -0.9
y = 0.5
sigma = 0.003
[lens_light]
x = 0.0
y = 0.0
sigma = 0.01
[[mass]]
profile = "SIS"
einstein_radius = { value = 1.0, min = 0.1, max = 3.0 }
[members]
catalogue = "members.ecsv"
reference_mag = 19.0
einstein_radius = { value = 0.12, min = 0.02, max = 0.5 }
cut = 6.0
"""

TABLE = """# %ECSV 1.0
# ---
# datatype:
# - {name: id, datatype: string}
# - {name: x, unit: arcsec, datatype: float64}
# - {name: y, unit: arcsec, datatype: float64}
# - {name: mag, datatype: float64}
# - {name: axis_ratio, datatype: float64}
# - {name: position_angle, datatype: float64}
# schema: astropy-2.0
id x y mag axis_ratio position_angle
g1 4.2 -3.1 19.5 0.8 30.0
g2 -6.0 2.5 20.3 "" ""
g3 8.0 8.0 18.0 0.5 -10.0
"""


def write(tmp_path, scenario=SCENARIO, table=TABLE, name="members.ecsv"):
    (tmp_path / "sc.toml").write_text(scenario)
    (tmp_path / name).write_text(table)
    return tmp_path / "sc.toml"


def test_members_scale_with_luminosity(tmp_path):
    """θE = θE*·(L/L*)^0.5, a = a*·(L/L*)^0.5, L/L* = 10^(-0.4 (m - m*)) (CONVENTIONS.md):
    the model's deflection is the main lens plus these truncated ellipsoids, built by hand;
    an empty shape cell means a round member; exclude drops a member by id."""
    sc, _ = load_scenario(
        write(tmp_path, SCENARIO.replace("cut = 6.0", 'cut = 6.0\nexclude = ["g3"]'))
    )
    members = sc.model.members
    assert members.ids == ("g1", "g2")
    assert sc.model.free_names == ["mass[0].einstein_radius", "members.einstein_radius"]
    lens = sc.model.lens(np.array([1.0, 0.2]))
    x, y = np.array([0.5, -1.2, 2.0]), np.array([0.3, 0.8, -1.0])
    ax, ay = lens.deflection(x, y)
    expected_x = x / np.hypot(x, y)  # the SIS of θE = 1
    expected_y = y / np.hypot(x, y)
    for mag, mx, my, q, pa in ((19.5, 4.2, -3.1, 0.8, 30.0), (20.3, -6.0, 2.5, 1.0, 0.0)):
        lum = 10 ** (-0.4 * (mag - 19.0))
        gal = TruncatedIsothermal(
            einstein_radius=0.2 * lum**0.5,
            cut=6.0 * lum**0.5,
            axis_ratio=q,
            position_angle=pa,
            x=mx,
            y=my,
        )
        gx, gy = gal.deflection(x, y)
        expected_x, expected_y = expected_x + gx, expected_y + gy
    np.testing.assert_allclose(ax, expected_x, rtol=1e-12)
    np.testing.assert_allclose(ay, expected_y, rtol=1e-12)


def test_members_given_in_ra_dec_are_placed_by_astropy(tmp_path):
    """ra, dec columns become offsets East/North of [sky] (astropy spherical offsets)."""
    centre = SkyCoord(150.0 * u.deg, -20.0 * u.deg)
    member = centre.spherical_offsets_by(10 * u.arcsec, -4 * u.arcsec)
    table = f"id,ra,dec,mag\nm1,{member.ra.deg:.10f},{member.dec.deg:.10f},19.0\n"
    path = write(tmp_path, SCENARIO.replace("members.ecsv", "members.csv"), table, "members.csv")
    sc, _ = load_scenario(path)
    assert sc.model.members.x[0] == pytest.approx(10.0, abs=1e-5)
    assert sc.model.members.y[0] == pytest.approx(-4.0, abs=1e-5)


BAD = [
    ("id,x,y\ng1,1,2\n", "column 'mag'"),
    ("id,x,y,mag\ng1,1,2,bright\n", "column 'mag' must hold numbers"),
    ("id,ra,dec,mag\ng1,150.001,-20,19\n", None),  # fine with [sky]; see the no-sky case
    ("name,x,y,mag\ng1,1,2,19\n", "needs a column 'id'"),
    ("id,x,y,mag,axis_ratio\ng1,1,2,19,1.5\n", "column 'axis_ratio' must be in (0, 1]"),
    ("id,x,y,mag\n", "must have at least one row"),
]


@pytest.mark.parametrize("table, message", BAD)
def test_bad_members_table_is_one_line(tmp_path, capsys, table, message):
    """Bad input: one line naming the scenario and the field, exit 2 (brief)."""
    path = write(tmp_path, SCENARIO.replace("members.ecsv", "members.csv"), table, "members.csv")
    code = main(["check", str(path)])
    err = capsys.readouterr().err
    if message is None:
        assert code == 0, err
        return
    assert code == 2
    lines = [line for line in err.splitlines() if "warning:" not in line]
    assert len(lines) == 1 and "members.catalogue" in lines[0] and message in lines[0]


def test_members_in_ra_dec_need_a_sky_position(tmp_path, capsys):
    scenario = SCENARIO.replace("[sky]\nra = 150.0\ndec = -20.0\n", "").replace(
        "members.ecsv", "members.csv"
    )
    path = write(tmp_path, scenario, "id,ra,dec,mag\ng1,150.001,-20,19\n", "members.csv")
    assert main(["check", str(path)]) == 2
    assert "needs [sky] ra, dec" in capsys.readouterr().err


def test_missing_members_file_and_missing_key(tmp_path, capsys):
    path = write(tmp_path)
    (tmp_path / "members.ecsv").unlink()
    assert main(["check", str(path)]) == 2
    assert "members.catalogue refers to 'members.ecsv', which does not exist" in (
        capsys.readouterr().err
    )
    path = write(tmp_path, SCENARIO.replace("reference_mag = 19.0\n", ""))
    assert main(["check", str(path)]) == 2
    assert "members.reference_mag is required" in capsys.readouterr().err


def test_members_near_the_images_are_drawn_in_the_sky_figure(tmp_path):
    """The sky view widens to the member galaxies near the images and draws them."""
    import warnings

    from lensdelay.api import fit_scenario
    from lensdelay.errors import LensdelayWarning
    from lensdelay.report.figures import sky_figure

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)  # an under-constrained double
        res = fit_scenario(write(tmp_path, table=TABLE.replace("g1 4.2 -3.1", "g1 2.5 -1.5")))
    view = res.sky_view(resolution=80)
    # the images span 1.9 arcsec of view: g1 (2.5 arcsec out) is within twice that, g2 and
    # g3 (6 and 8 arcsec) are not
    assert view["extent"] == pytest.approx(1.15 * 2.5)
    np.testing.assert_allclose(view["members"]["x"], [2.5, -6.0, 8.0])
    fig = sky_figure(view)
    labels = fig.axes[0].get_legend_handles_labels()[1]
    assert "member galaxies" in labels


@pytest.mark.parametrize(
    "change, message",
    [
        ('cut = 6.0\nexclude = ["g9"]', "members.exclude must name ids of members.catalogue"),
        ("cut = 0.1\ncore = 0.2", "members.cut must be greater than members.core"),
        (
            "cut = { value = 6.0, min = 0.1, max = 30.0 }\ncore = 0.2",
            "members.cut must be greater than members.core over both their ranges",
        ),
    ],
)
def test_exclude_of_an_unknown_id_and_cut_inside_core_are_one_line(
    tmp_path, capsys, change, message
):
    """Bad input (issue 16): one line naming the scenario and the field, exit 2."""
    path = write(tmp_path, SCENARIO.replace("cut = 6.0", change))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and message in err and str(path) in err
