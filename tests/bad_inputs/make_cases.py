"""Regenerate the bad-input corpus: python tests/bad_inputs/make_cases.py (each file states its
expected message)."""

import pathlib

base = """name = "Broken demo"
[lens]
redshift = 0.4
[sky]
ra = 150.0
dec = -20.0
[cosmology]
H0 = 70.0
Om0 = 0.3
[[family]]
label = "sn"
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
[[family.image]]
label = "C"
x = 0.2
y = 1.0
sigma = 0.003
[[family.image]]
label = "D"
x = -0.3
y = -0.9
sigma = 0.003
[lens_light]
x = 0.0
y = 0.0
sigma = 0.01
[transient]
family = "sn"
seen_in = "A"
date = "2027-02-14"
date_sigma_days = 1.0
magnitude = 22.0
[site]
latitude = -30.0
longitude = -70.0
height = 2000.0
[[mass]]
profile = "SIE"
einstein_radius = { value = 1.0, min = 0.1, max = 3.0 }
axis_ratio = { value = 0.8, min = 0.2, max = 1.0 }
position_angle = { value = 0.0 }
x = { value = 0.0 }
y = { value = 0.0 }
[[mass]]
profile = "shear"
strength = { value = 0.05, min = 0.0, max = 0.3 }
position_angle = { value = 0.0 }
"""
cases = {
    # name: (text transform, expected)
    "toml_syntax_bracket": (lambda t: t.replace("[lens]", "[lens"), "is not valid TOML"),
    "toml_syntax_string": (lambda t: t.replace('label = "sn"', 'label = "sn'), "is not valid TOML"),
    "toml_duplicate_key": (
        lambda t: t.replace("redshift = 0.4", "redshift = 0.4\nredshift = 0.5"),
        "is not valid TOML",
    ),
    "empty_file": (lambda t: "", "is empty, expected a TOML document"),
    "only_comments": (lambda t: "# nothing here\n", "is empty, expected a TOML document"),
    "lens_missing": (
        lambda t: t.replace("[lens]\nredshift = 0.4\n", ""),
        "lens is required ([lens] with redshift, reference_source_redshift), got nothing",
    ),
    "lens_redshift_missing": (
        lambda t: t.replace("redshift = 0.4\n", "", 1),
        "lens.redshift is required",
    ),
    "lens_redshift_string": (
        lambda t: t.replace("redshift = 0.4", 'redshift = "0.4"'),
        "lens.redshift must be a number, got '0.4'",
    ),
    "lens_redshift_negative": (
        lambda t: t.replace("redshift = 0.4", "redshift = -0.4"),
        "lens.redshift must be > 0",
    ),
    "lens_redshift_nan": (
        lambda t: t.replace("redshift = 0.4", "redshift = nan"),
        "lens.redshift must be finite",
    ),
    "lens_redshift_huge": (
        lambda t: t.replace("redshift = 0.4", "redshift = 1e300"),
        "lens.redshift must be <= 20",
    ),
    "source_in_front_of_lens": (
        lambda t: t.replace("redshift = 1.5", "redshift = 0.3"),
        "family[0].redshift must exceed lens.redshift 0.4 by at least 0.01 (closer, D_ls -> 0 and "
        "delays diverge), got 0.3",
    ),
    "source_at_lens": (
        lambda t: t.replace("redshift = 1.5", "redshift = 0.4"),
        "family[0].redshift must exceed lens.redshift 0.4 by at least 0.01",
    ),
    "source_just_behind_lens": (
        lambda t: t.replace("redshift = 1.5", "redshift = 0.4000001"),
        "family[0].redshift must exceed lens.redshift 0.4 by at least 0.01",
    ),
    "images_coincide": (
        lambda t: t.replace("x = 0.2\ny = 1.0", "x = -0.9\ny = 0.5"),
        "family[0].image[2] must not lie where image 'B' lies",
    ),
    "no_family": (
        lambda t: t.split("[[family]]")[0] + "[[mass]]" + t.split("[[mass]]", 1)[1],
        "scenario.family needs at least one [[family]] table",
    ),
    "family_no_images": (
        lambda t: (
            t.replace("redshift = 1.5\n", "redshift = 1.5\nimage = []\n").split("[[family.image]]")[
                0
            ]
            + "[lens_light]"
            + t.split("[lens_light]")[1]
        ),
        "family[0].image needs at least one [[image]] table",
    ),
    "duplicate_image_label": (
        lambda t: t.replace('label = "B"', 'label = "A"'),
        "family[0].image[1].label must be unique within family 'sn', got 'A' twice",
    ),
    "duplicate_family_label": (
        lambda t: t.replace(
            "[lens_light]",
            '[[family]]\nlabel = "sn"\nredshift = 2.0\n[[family.image]]\nlabel = "P"\nx = 0.1\ny '
            "= 0.1\nsigma = 0.01\n[lens_light]",
        ),
        "family[1].label must be unique, got 'sn' twice",
    ),
    "image_x_string": (
        lambda t: t.replace("x = 1.1", 'x = "1.1"'),
        "family[0].image[0].x must be a number",
    ),
    "image_x_inf": (
        lambda t: t.replace("x = 1.1", "x = inf"),
        "family[0].image[0].x must be finite",
    ),
    "image_x_absurd": (
        lambda t: t.replace("x = 1.1", "x = 1e9"),
        "family[0].image[0].x must be <= 3600",
    ),
    "image_sigma_zero": (
        lambda t: t.replace("sigma = 0.003", "sigma = 0.0", 1),
        "family[0].image[0].sigma must be > 0, got 0",
    ),
    "image_sigma_negative": (
        lambda t: t.replace("sigma = 0.003", "sigma = -0.003", 1),
        "family[0].image[0].sigma must be > 0",
    ),
    "image_missing_y": (
        lambda t: t.replace("y = 0.3\n", "", 1),
        "family[0].image[0].y is required",
    ),
    "image_unknown_key": (
        lambda t: t.replace("x = 1.1", "x = 1.1\nsigmma = 0.1"),
        "family[0].image[0].sigmma is not a known key (did you mean 'sigma'?)",
    ),
    "top_unknown_key": (
        lambda t: "familly = 3\n" + t,
        "scenario.familly is not a known key (did you mean 'family'?)",
    ),
    "sky_dec_out_of_range": (
        lambda t: t.replace("dec = -20.0", "dec = -120.0"),
        "sky.dec must be >= -90",
    ),
    "cosmology_bad_name": (
        lambda t: t.replace("H0 = 70.0\nOm0 = 0.3", 'name = "Planck2099"'),
        "cosmology.name must be one of",
    ),
    "cosmology_h0_zero": (
        lambda t: t.replace("H0 = 70.0", "H0 = 0.0"),
        "cosmology.H0 must be between 10 and 200",
    ),
    "cosmology_unknown_key": (
        lambda t: t.replace("Om0 = 0.3", "Om0 = 0.3\nOmega_m = 0.3"),
        "cosmology.Omega_m is not a known key",
    ),
    "transient_bad_date": (
        lambda t: t.replace('date = "2027-02-14"', 'date = "14/02/2027"'),
        "transient.date must be an ISO 8601 date such as 2027-03-04, got '14/02/2027'",
    ),
    "transient_impossible_date": (
        lambda t: t.replace('date = "2027-02-14"', 'date = "2027-02-30"'),
        "transient.date must be an ISO 8601 date",
    ),
    "transient_bad_offset": (
        lambda t: t.replace('date = "2027-02-14"', 'date = "2027-02-14T10:00:00+25:00"'),
        "transient.date must be an ISO 8601 date such as 2027-03-04, got "
        "'2027-02-14T10:00:00+25:00'",
    ),
    "transient_unknown_image": (
        lambda t: t.replace('seen_in = "A"', 'seen_in = "E"'),
        "transient.seen_in must be an image of family 'sn' ('A', 'B', 'C' or 'D'), got 'E'",
    ),
    "transient_unknown_family": (
        lambda t: t.replace('family = "sn"\nseen_in', 'family = "qso"\nseen_in'),
        "transient.family must name a family ('sn'), got 'qso'",
    ),
    "transient_negative_sigma": (
        lambda t: t.replace("date_sigma_days = 1.0", "date_sigma_days = -1.0"),
        "transient.date_sigma_days must be >= 0",
    ),
    "site_latitude": (
        lambda t: t.replace("latitude = -30.0", "latitude = -95.0"),
        "site.latitude must be >= -90, got -95",
    ),
    "site_both_kinds": (
        lambda t: t.replace("height = 2000.0", "height = 2000.0\nsolar_elongation = [40.0, 140.0]"),
        "site must be either a ground site",
    ),
    "site_elongation_range": (
        lambda t: t.replace(
            "latitude = -30.0\nlongitude = -70.0\nheight = 2000.0",
            "solar_elongation = [30.0, 200.0]",
        ),
        "site.solar_elongation must satisfy 0 <= min < max <= 180",
    ),
    "site_elongation_reversed": (
        lambda t: t.replace(
            "latitude = -30.0\nlongitude = -70.0\nheight = 2000.0",
            "solar_elongation = [120.0, 60.0]",
        ),
        "site.solar_elongation must satisfy 0 <= min < max <= 180",
    ),
    "delay_unknown_image": (
        lambda t: (
            t
            + '[[delay]]\nfamily = "sn"\nimage = "Q"\nrelative_to = "A"\ndays = 5.0\nsigma = 1.0\n'
        ),
        "delay[0].image must be an image of family 'sn'",
    ),
    "delay_negative_sigma": (
        lambda t: (
            t
            + '[[delay]]\nfamily = "sn"\nimage = "B"\nrelative_to = "A"\ndays = 5.0\nsigma = -1.0\n'
        ),
        "delay[0].sigma must be > 0",
    ),
    "delay_self": (
        lambda t: (
            t
            + '[[delay]]\nfamily = "sn"\nimage = "A"\nrelative_to = "A"\ndays = 0.0\nsigma = 1.0\n'
        ),
        "delay[0].relative_to must differ from delay[0].image",
    ),
    "mass_unknown_profile": (
        lambda t: t.replace('profile = "SIE"', 'profile = "SEI"'),
        "mass[0].profile must be one of",
    ),
    "mass_unknown_parameter": (
        lambda t: t.replace("axis_ratio = {", "axis_ration = {"),
        "mass[0].axis_ration is not a parameter of SIE (did you mean 'axis_ratio'?)",
    ),
    "mass_negative_einstein": (
        lambda t: t.replace(
            "einstein_radius = { value = 1.0, min = 0.1, max = 3.0 }", "einstein_radius = -1.0"
        ),
        "mass[0].einstein_radius must be > 0, got -1",
    ),
    "mass_axis_ratio_above_one": (
        lambda t: t.replace(
            "axis_ratio = { value = 0.8, min = 0.2, max = 1.0 }", "axis_ratio = 1.3"
        ),
        "mass[0].axis_ratio must be in (0, 1], got 1.3",
    ),
    "mass_min_above_max": (
        lambda t: t.replace("min = 0.1, max = 3.0", "min = 3.0, max = 0.1"),
        "mass[0].einstein_radius.min must not exceed mass[0].einstein_radius.max",
    ),
    "mass_prior_sigma_zero": (
        lambda t: t.replace("x = { value = 0.0 }", "x = { value = 0.0, prior = [0.0, 0.0] }"),
        "mass[0].x.prior sigma must be > 0, got 0",
    ),
    "mass_value_outside_bounds": (
        lambda t: t.replace("value = 1.0, min = 0.1", "value = 5.0, min = 0.1"),
        "mass[0].einstein_radius.value must lie within [min, max]",
    ),
    "mass_missing_required": (
        lambda t: t.replace("einstein_radius = { value = 1.0, min = 0.1, max = 3.0 }\n", ""),
        "mass[0].einstein_radius is required for profile SIE",
    ),
    "mass_shear_with_centre": (
        lambda t: t.replace("strength = {", "x = 0.1\nstrength = {"),
        "mass[1].x is not a parameter of shear",
    ),
    "mass_and_model_both": (
        lambda t: 'model = "models/sie_shear.toml"\n' + t,
        "scenario must give either [[mass]] entries or model",
    ),
    "model_file_missing": (
        lambda t: 'model = "models/does_not_exist.toml"\n' + t.split("[[mass]]")[0],
        "model refers to 'models/does_not_exist.toml', which does not exist",
    ),
    "too_few_constraints": (
        lambda t: (
            t.split('[[family.image]]\nlabel = "C"')[0] + "[transient]" + t.split("[transient]")[1]
        ),
        "under-constrained fit",
    ),
    "bad_utf8": (None, "must be UTF-8 text"),
}
out = pathlib.Path(__file__).parent
for name, (fn, expected) in cases.items():
    if fn is None:
        (out / f"{name}.toml").write_bytes(
            b"# expect: " + expected.encode() + b'\nname = "\xff\xfe"\n'
        )
        continue
    text = fn(base)
    (out / f"{name}.toml").write_text(f"# expect: {expected}\n" + text)
print(len(cases))
