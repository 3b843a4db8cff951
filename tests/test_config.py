"""Tests of rlmeson.io.config.

Basis: the schema in the module docstring of rlmeson.io.config and the registries it reads
(interactions, kernel.REGULARISATIONS, channels, bse.CONTINUATIONS).  Expected values
are the defaults and ranges written in that schema; hashes are checked only for
invariance and change, never against stored digests.
"""

import copy
import dataclasses
import math

import pytest
from hypothesis import given, settings, strategies as st

from rlmeson.io import config as cfg
from rlmeson.io.config import ConfigError

FULL = """
name = "mt-pion"
description = "Maris-Tandy pion and rho"

[interaction]
model = "maris-tandy"
omega_gev = 0.4
strength_gev2 = 0.933

[kernel]
z2_squared = true
regularisation = "hard-cutoff"
cutoff_gev2 = 1.0e5

[renormalisation]
point_gev = 19.0

[quarks.l]
current_mass_gev = 0.00374

[quarks.s]
current_mass_gev = 0.083

[[mesons]]
name = "pion"
channel = "pseudoscalar"
quarks = ["l", "l"]
mass_guess_gev = 0.14

[[mesons]]
name = "rho"
channel = "vector"

[numerics.gap]
order = 8

[numerics.bse]
z_points = 8
continuation = "shifted"

[output]
decay_constant_convention = "92"
cache_dir = "cache"
"""

# The same physics: keys reordered, comments, other formatting, every default written out.
REORDERED = """
# a comment
[output]
cache_dir = "elsewhere"      # output does not enter the hash
error_bar = false
decay_constant_convention = "131"

[numerics.bse]
continuation = "shifted"
angular_points = 32
z_points = 8
order = 8
panel_widths = [6, 2.4, 5.0, 5.0]
q2_min_gev2 = 0.0001

[numerics.gap]
angular_points = 32
panel_widths = [4.0, 1.2, 3.6, 3.6]
q2_min_gev2 = 1e-6
order = 8

[[mesons]]
channel = "pseudoscalar"
mass_guess_gev = 0.14
eta = 0.5
quarks = ["l", "l"]
name = "pion"

[[mesons]]
quarks = ["l", "l"]
channel = "vector"
name = "rho"

[quarks]
l = { current_mass_gev = 3.74e-3 }
s.current_mass_gev = 0.083

[renormalisation]
point_gev = 19

[kernel]
grid_end_gev2 = 1e11
regulator_gev2 = 1e6
cutoff_gev2 = 100000
regularisation = "hard-cutoff"
z2_squared = true

[interaction]
uv_strength = 1.0
flavours = 4
lambda_qcd_gev = 0.234
tau = 6.3890560989306495
gluon_mass_scale_gev = 0.5
strength_gev2 = 0.933
omega_gev = 0.4
model = "maris-tandy"
"""
REORDERED = 'description = "other words"\nname = "another-name"\n' + REORDERED

MINIMAL = 'name = "x"\n[quarks.l]\ncurrent_mass_gev = 0.005\n'


def full_dict():
    return cfg.parse(FULL).to_dict()


def test_full_config_defaults_filled():
    c = cfg.parse(FULL, source="full.toml")
    assert c.name == "mt-pion" and c.source == "full.toml"
    p = c.interaction.param_dict()
    assert p["omega_gev"] == 0.4 and p["tau"] == pytest.approx(math.e**2 - 1)
    assert [k for k, _ in c.interaction.params] == sorted(p)
    assert c.kernel == cfg.KernelConfig(True, "hard-cutoff", 1e5, 1e6, 1e11)
    assert c.renormalisation_point_gev == 19.0
    assert [f.name for f in c.flavours] == ["l", "s"]
    assert c.flavour("s").current_mass_gev == 0.083
    pion, rho = c.mesons
    assert pion == cfg.MesonConfig("pion", "pseudoscalar", ("l", "l"), 0.5, 0.14)
    assert rho.quarks == ("l", "l") and rho.mass_guess_gev is None  # first flavour twice
    assert c.gap == cfg.GapNumerics(1e-6, (4.0, 1.2, 3.6, 3.6), 8, 32)
    assert c.bse == cfg.BSENumerics(1e-4, (6.0, 2.4, 5.0, 5.0), 8, 8, 32, "shifted")
    assert c.output == cfg.OutputConfig("92", "cache", True)
    assert isinstance(c.gap.q2_min_gev2, float) and isinstance(c.gap.order, int)
    with pytest.raises(dataclasses.FrozenInstanceError):
        c.name = "y"


def test_minimal_config_and_to_dict_round_trip():
    c = cfg.parse(MINIMAL)
    assert c.interaction.model == "maris-tandy" and c.mesons == () and c.output.cache_dir is None
    for text in (MINIMAL, FULL):
        c = cfg.parse(text)
        again = cfg.from_dict(c.to_dict())
        assert again == c and again.hash() == c.hash()


def test_hash_invariant_under_layout_and_explicit_defaults():
    a, b = cfg.parse(FULL), cfg.parse(REORDERED)
    assert a.hash() == b.hash()
    assert len(a.hash()) == 16 and int(a.hash(), 16) >= 0
    assert a.physics_dict() == b.physics_dict()
    for f in ("l", "s"):
        assert a.quark_key(f) == b.quark_key(f)
    assert [a.meson_key(m) for m in a.mesons] == [b.meson_key(m) for m in b.mesons]


@pytest.mark.parametrize("path, value", [
    (("interaction", "omega_gev"), 0.5),
    (("interaction", "model"), "qin-chang"),
    (("kernel", "cutoff_gev2"), 2e5),
    (("kernel", "z2_squared"), False),
    (("renormalisation", "point_gev"), 2.0),
    (("quarks", "s", "current_mass_gev"), 0.1),
    (("mesons", 0, "mass_guess_gev"), 0.2),
    (("numerics", "gap", "order"), 10),
    (("numerics", "bse", "z_points"), 10),
    (("numerics", "bse", "continuation"), "direct"),
])
def test_hash_changes_with_physics(path, value):
    d = full_dict()
    set_in(d, path, value)
    assert cfg.from_dict(d).hash() != cfg.parse(FULL).hash()


def test_hash_ignores_labels_output_and_unused_regulator():
    base = cfg.parse(FULL).hash()
    for path, value in [(("name",), "other"), (("description",), "changed"),
                        (("output", "cache_dir"), "/tmp/x"), (("output", "error_bar"), False),
                        (("output", "decay_constant_convention"), "131"),
                        (("kernel", "regulator_gev2"), 5e6)]:  # not used by the hard cutoff
        d = full_dict()
        set_in(d, path, value)
        assert cfg.from_dict(d, source="elsewhere.toml").hash() == base, path


def test_quark_and_meson_keys():
    c = cfg.parse(FULL)
    assert c.quark_key("l") != c.quark_key("s")
    for path, value in [(("numerics", "bse", "order"), 12), (("mesons", 0, "mass_guess_gev"), 0.3),
                        (("quarks", "s", "current_mass_gev"), 0.09)]:
        d = full_dict()
        set_in(d, path, value)
        assert cfg.from_dict(d).quark_key("l") == c.quark_key("l"), path
    d = full_dict()
    set_in(d, ("numerics", "gap", "order"), 12)
    changed = cfg.from_dict(d)
    assert changed.quark_key("l") != c.quark_key("l")
    assert changed.meson_key(changed.mesons[0]) != c.meson_key(c.mesons[0])
    pion, rho = c.mesons
    assert c.meson_key(pion) != c.meson_key(rho)
    d = full_dict()
    set_in(d, ("numerics", "bse", "z_points"), 12)
    assert cfg.from_dict(d).meson_key(pion) != c.meson_key(pion)


def test_translation_invariant_valid_and_user_model():
    c = cfg.parse(MINIMAL + '[kernel]\nregularisation = "translation-invariant"\n')
    assert c.kernel.relevant() == {"z2_squared": True, "regularisation": "translation-invariant",
                                   "regulator_gev2": 1e6, "grid_end_gev2": 1e11}
    u = cfg.parse(MINIMAL + '[interaction]\nmodel = "user_models:gaussian"\nwidth = 2\n')
    assert u.interaction.param_dict() == {"width": 2.0}


def test_load(tmp_path):
    p = tmp_path / "run.toml"
    p.write_text(FULL)
    assert cfg.load(p).source == str(p)
    with pytest.raises(ConfigError) as e:
        cfg.load(tmp_path / "absent.toml")
    assert e.value.key == "<file>" and "absent.toml" in str(e.value)
    bad = tmp_path / "bad.toml"
    bad.write_text('name = "x"\n[quarks.l\n')
    with pytest.raises(ConfigError) as e:
        cfg.load(bad)
    assert "bad.toml" in str(e.value) and "line 2" in str(e.value)


def set_in(d, path, value):
    for k in path[:-1]:
        d = d[k]
    d[path[-1]] = value


def del_in(d, path):
    for k in path[:-1]:
        d = d[k]
    del d[path[-1]]


TI = [(("kernel", "regularisation"), "translation-invariant")]

# (label, edits, expected dotted key, expected value text); an edit of value ... deletes.
BAD = [
    ("unknown top-level key", [(("colour",), "red")], "colour", "'red'"),
    ("unknown nested key", [(("numerics", "gap", "points"), 3)], "numerics.gap.points", "3"),
    ("unknown parameter", [(("interaction", "omega"), 0.4)], "interaction.omega", "0.4"),
    ("unknown model", [(("interaction", "model"), "nonesuch")], "interaction.model", "'nonesuch'"),
    ("user model not importable", [(("interaction", "model"), "no_such_mod_xyz:g")],
     "interaction.model", "'no_such_mod_xyz:g'"),
    ("user model not callable", [(("interaction", "model"), "math:pi")], "interaction.model", "'math:pi'"),
    ("negative mass", [(("quarks", "l", "current_mass_gev"), -0.001)], "quarks.l.current_mass_gev", "-0.001"),
    ("mass too large", [(("quarks", "l", "current_mass_gev"), 11)], "quarks.l.current_mass_gev", "11"),
    ("omega zero", [(("interaction", "omega_gev"), 0.0)], "interaction.omega_gev", "0.0"),
    ("string for number", [(("kernel", "cutoff_gev2"), "1e5")], "kernel.cutoff_gev2", "'1e5'"),
    ("bool for int", [(("numerics", "gap", "order"), True)], "numerics.gap.order", "True"),
    ("bool for float", [(("renormalisation", "point_gev"), True)], "renormalisation.point_gev", "True"),
    ("float for int", [(("numerics", "gap", "order"), 8.0)], "numerics.gap.order", "8.0"),
    ("NaN", [(("interaction", "strength_gev2"), math.nan)], "interaction.strength_gev2", "nan"),
    ("inf", [(("kernel", "cutoff_gev2"), math.inf)], "kernel.cutoff_gev2", "inf"),
    ("order too small", [(("numerics", "gap", "order"), 3)], "numerics.gap.order", "3"),
    ("z_points odd", [(("numerics", "bse", "z_points"), 9)], "numerics.bse.z_points", "9"),
    ("angular_points too small", [(("numerics", "bse", "angular_points"), 7)],
     "numerics.bse.angular_points", "7"),
    ("zeta above cutoff", [(("kernel", "cutoff_gev2"), 100.0)], "renormalisation.point_gev", "19.0"),
    ("zeta below grid", [(("renormalisation", "point_gev"), 1e-4)], "renormalisation.point_gev", "0.0001"),
    ("regulator not >> zeta", TI + [(("kernel", "regulator_gev2"), 1000.0)], "kernel.regulator_gev2", "1000.0"),
    ("grid_end too small", TI + [(("kernel", "grid_end_gev2"), 1e9)], "kernel.grid_end_gev2", "1000000000.0"),
    ("undefined quark", [(("mesons", 0, "quarks"), ["l", "c"])], 'mesons["pion"].quarks[1]', "'c'"),
    ("duplicate meson", [(("mesons", 1, "name"), "pion")], "mesons[2].name", "'pion'"),
    ("bad channel", [(("mesons", 0, "channel"), "tensor")], 'mesons["pion"].channel', "'tensor'"),
    ("eta not below 1", [(("mesons", 0, "eta"), 1.0)], 'mesons["pion"].eta', "1.0"),
    ("eta not above 0", [(("mesons", 0, "eta"), 0.0)], 'mesons["pion"].eta', "0.0"),
    ("meson name missing", [(("mesons", 1, "name"), ...)], "mesons[2].name", "<missing>"),
    ("no flavours", [(("quarks",), {})], "quarks", "{}"),
    ("flavours missing", [(("quarks",), ...)], "quarks", "<missing>"),
    ("bad flavour name", [(("quarks", "1x"), {"current_mass_gev": 0.1})], "quarks.1x", "'1x'"),
    ("missing name", [(("name",), ...)], "name", "<missing>"),
    ("bad name", [(("name",), "has space")], "name", "'has space'"),
    ("missing meson channel", [(("mesons", 0, "channel"), ...)], 'mesons["pion"].channel', "<missing>"),
    ("mass guess above 10 GeV", [(("mesons", 0, "mass_guess_gev"), 50.0)], 'mesons["pion"].mass_guess_gev', "50.0"),
    ("lambda_qcd above its range", [(("interaction", "lambda_qcd_gev"), 3.0)], "interaction.lambda_qcd_gev", "3.0"),
    ("cutoff beyond 1e12", [(("kernel", "cutoff_gev2"), 1e300)], "kernel.cutoff_gev2", "1e+300"),
    ("regulator beyond 1e10", TI + [(("kernel", "regulator_gev2"), 1e12)], "kernel.regulator_gev2",
     "1000000000000.0"),
    ("grid end beyond 1e16", TI + [(("kernel", "grid_end_gev2"), 1e20)], "kernel.grid_end_gev2", "1e+20"),
    ("gap q2_min too large", [(("numerics", "gap", "q2_min_gev2"), 0.5)], "numerics.gap.q2_min_gev2", "0.5"),
    ("panel_widths wrong length", [(("numerics", "gap", "panel_widths"), [1.0, 2.0])],
     "numerics.gap.panel_widths", "[1.0, 2.0]"),
    ("panel width too large", [(("numerics", "bse", "panel_widths"), [1.0, 2.0, 11.0, 1.0])],
     "numerics.bse.panel_widths[2]", "11.0"),
    ("bse q2_min too large", [(("numerics", "bse", "q2_min_gev2"), 1.0)], "numerics.bse.q2_min_gev2", "1.0"),
    ("bad continuation", [(("numerics", "bse", "continuation"), "rotated")],
     "numerics.bse.continuation", "'rotated'"),
    ("bad convention", [(("output", "decay_constant_convention"), 93)],
     "output.decay_constant_convention", "93"),
    ("convention as a float", [(("output", "decay_constant_convention"), 92.0)],
     "output.decay_constant_convention", "92.0"),
    ("table expected", [(("kernel",), 5)], "kernel", "5"),
    ("mesons not a list", [(("mesons",), {"name": "pion"})], "mesons", "{'name': 'pion'}"),
]


@pytest.mark.parametrize("label, edits, key, shown", BAD, ids=[b[0] for b in BAD])
def test_bad_config_one_line_error(label, edits, key, shown):
    d = full_dict()
    for path, value in edits:
        (del_in(d, path) if value is ... else set_in(d, path, value))
    with pytest.raises(ConfigError) as e:
        cfg.from_dict(d)
    msg = str(e.value)
    assert "\n" not in msg and len(msg.splitlines()) == 1
    assert msg.startswith(f"config error: {key} = {shown}: "), msg
    assert e.value.key == key


def test_toml_syntax_error_names_file_and_line():
    with pytest.raises(ConfigError) as e:
        cfg.parse('name = "x"\n\nomega = = 3\n', source="run.toml")
    msg = str(e.value)
    assert msg.startswith("config error: <file> = 'run.toml': ") and "line 3" in msg and "\n" not in msg


def test_unknown_key_lists_allowed():
    d = full_dict()
    d["interaction"]["omega"] = 0.4
    with pytest.raises(ConfigError) as e:
        cfg.from_dict(d)
    assert "omega_gev" in e.value.allowed and "strength_gev2" in e.value.allowed


# ----------------------------------------------------------------------------------------
# Fuzzing: anything in, a Config or a one-line ConfigError out

VALUES = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats()
    | st.text(alphabet="ablsx0.-_ ", max_size=6) | st.sampled_from(["l", "s", "pion", "vector"]),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(alphabet="ablx_", max_size=4), inner,
                                                                max_size=3),
    max_leaves=6,
)


def _mutate(draw, d):
    """Walk to a random container inside d and replace, insert or delete one entry."""
    node = d
    while True:
        keys = list(node) if isinstance(node, dict) else list(range(len(node)))
        if not keys:
            break
        k = draw(st.sampled_from(keys))
        if isinstance(node[k], (dict, list)) and draw(st.booleans()):
            node = node[k]
            continue
        action = draw(st.sampled_from(["replace", "insert", "delete"]))
        if action == "replace":
            node[k] = draw(VALUES)
        elif action == "delete":
            del node[k]
        elif isinstance(node, dict):
            node[draw(st.text(max_size=5))] = draw(VALUES)
        else:
            node.append(draw(VALUES))
        return
    if isinstance(node, dict):
        node[draw(st.text(max_size=5))] = draw(VALUES)
    else:
        node.append(draw(VALUES))


BASE = full_dict()


def _check_outcome(call):
    try:
        result = call()
    except ConfigError as e:
        assert len(str(e).splitlines()) == 1 and str(e).startswith("config error: ")
        return
    assert isinstance(result, cfg.Config)
    assert len(result.hash()) == 16


@settings(max_examples=200, deadline=None)
@given(st.data())
def test_fuzz_from_dict(data):
    d = copy.deepcopy(BASE)
    for _ in range(data.draw(st.integers(1, 4))):
        _mutate(data.draw, d)
    _check_outcome(lambda: cfg.from_dict(d))


@settings(max_examples=200, deadline=None)
@given(st.one_of(st.text(max_size=200),
                 st.builds(lambda a, i, b: FULL[:i] + a + FULL[i + b:],
                           st.text(max_size=8), st.integers(0, len(FULL)), st.integers(0, 8))))
def test_fuzz_parse(text):
    _check_outcome(lambda: cfg.parse(text))


@settings(max_examples=200, deadline=None)
@given(VALUES)
def test_fuzz_any_value(value):
    _check_outcome(lambda: cfg.from_dict(value))


# ----------------------------------------------------------------------------------------
# Small edges: BOM, conventions written as numbers, cache_dir next to the file

def test_utf8_byte_order_mark_is_accepted(tmp_path):
    p = tmp_path / "bom.toml"
    p.write_bytes(b"\xef\xbb\xbf" + MINIMAL.encode())
    assert cfg.load(p).name == "x"


@pytest.mark.parametrize("written, stored", [(92, "92"), ("92", "92"), (131, "131"), ("131", "131")])
def test_decay_constant_convention_as_number_or_string(written, stored):
    text = MINIMAL + f"[output]\ndecay_constant_convention = {written!r}\n".replace("'", '"')
    assert cfg.parse(text).output.decay_constant_convention == stored


def test_relative_cache_dir_is_taken_from_the_config_files_directory(tmp_path, monkeypatch):
    (tmp_path / "sub").mkdir()
    p = tmp_path / "sub" / "c.toml"
    p.write_text(MINIMAL + '[output]\ncache_dir = "store"\n')
    monkeypatch.chdir(tmp_path)
    assert cfg.load(p).output.cache_dir == str((tmp_path / "sub" / "store").resolve())
    p.write_text(MINIMAL + f'[output]\ncache_dir = "{tmp_path / "abs"}"\n')
    assert cfg.load("sub/c.toml").output.cache_dir == str(tmp_path / "abs")


def test_reading_a_config_does_not_import_jax():
    """Parsing first and importing the numerics after keeps a bad config's rejection
    fast; a fresh interpreter must not have imported jax after config.load."""
    import subprocess
    import sys

    code = ("import sys, rlmeson.io.config as c\n"
            "c.parse('name = \"x\"\\n[quarks.l]\\ncurrent_mass_gev = 0.005\\n')\n"
            "print('jax' in sys.modules)")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert r.stdout.strip() == "False"


# ----------------------------------------------------------------------------------------
# Plausibility: warnings, not errors

def test_heavy_current_mass_warns_naming_the_key():
    c = cfg.parse('name = "x"\n[quarks.h]\ncurrent_mass_gev = 4\n')
    w = cfg.plausibility_warnings(c)
    assert len(w) == 1 and "quarks.h.current_mass_gev" in w[0] and "\n" not in w[0]
    assert cfg.plausibility_warnings(cfg.parse(MINIMAL)) == []


def test_parameter_left_at_default_beside_a_set_one_warns():
    """Setting ω without D (or Λ_QCD without N_f) keeps a published value of the other
    that belongs to a different fit; the warning names the key left alone."""
    c = cfg.parse(MINIMAL + "[interaction]\nomega_gev = 0.5\n")
    w = cfg.plausibility_warnings(c)
    assert len(w) == 1 and w[0].startswith("interaction.strength_gev2 is left at its default")
    both = cfg.parse(MINIMAL + "[interaction]\nomega_gev = 0.5\nstrength_gev2 = 0.8\n")
    assert cfg.plausibility_warnings(both) == []
    assert any("interaction.lambda_qcd_gev" in x and "running coupling" in x
               for x in cfg.plausibility_warnings(cfg.parse(MINIMAL + "[interaction]\nflavours = 3\n")))


def test_describe_echoes_model_parameters_and_masses():
    lines = cfg.describe(cfg.parse(MINIMAL + "[interaction]\nomega_gev = 0.5\nstrength_gev2 = 0.8\n"))
    text = "\n".join(lines)
    assert "maris-tandy" in lines[0] and "omega_gev = 0.5" in text and "tau = " in text and "(default)" in text
    assert "l = 5 MeV" in text


# ----------------------------------------------------------------------------------------
# User interactions are probed once (finite, right shape, traceable with JAX)

@pytest.mark.parametrize("func, says", [("nan_at_zero", "finite"), ("scalar", "shape"),
                                        ("nothing", "None"), ("plain_numpy", "traced")])
def test_bad_user_interaction_is_one_line_naming_the_model_key(func, says):
    with pytest.raises(ConfigError) as e:
        cfg.parse(MINIMAL + f'[interaction]\nmodel = "user_models:{func}"\nwidth = 1\n')
    msg = str(e.value)
    assert e.value.key == "interaction.model" and says in msg and "\n" not in msg


def test_error_bar_on_a_grid_that_cannot_be_coarsened_warns():
    """The second grid has panels 1.5 times wider and two fewer z points (at least 4);
    with panels as wide as the zones and 4 z points it is the same grid (measured: an
    'error' of 1e-14 on m_π), so the error bar is meaningless."""
    meson = '[[mesons]]\nname = "pi"\nchannel = "pseudoscalar"\n'
    wide = MINIMAL + meson + "[numerics.bse]\nz_points = 4\npanel_widths = [10.0, 10.0, 10.0, 10.0]\n"
    w = cfg.plausibility_warnings(cfg.parse(wide))
    assert len(w) == 1 and w[0].startswith("output.error_bar = true")
    assert cfg.plausibility_warnings(cfg.parse(MINIMAL + meson)) == []
    assert cfg.plausibility_warnings(cfg.parse(wide + "[output]\nerror_bar = false\n")) == []
