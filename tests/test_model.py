"""The model-file loader (vfactor.model): contract of ARCHITECTURE section 4.

Outside references: the metre values of the inch (0.0254 m) and foot (0.3048 m) are exact
by the international yard and pound agreement of 1959; SHA-256 digests from Python's
hashlib (FIPS 180-4 implementation).
"""

from __future__ import annotations

import hashlib
import math

import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from vfactor.errors import ModelError
from vfactor.model import SHAPES, load_model, load_model_text

COATING = """
[coatings.w]
solar_absorptivity = 0.2
ir_emissivity = 0.8
"""

PLATE = """
[[parts]]
name = "plate"
shape = "rectangle"
size = [1.0, 2.0]
front = { coating = "w" }
"""


def load(text, **kw):
    return load_model_text(text, "m.toml", **kw)


def test_demo_model_loads(demo_model_path):
    m = load_model(demo_model_path)
    assert m.length_unit == "m"
    assert m.radiation.rays_per_node == 100_000 and m.radiation.seed == 1
    assert m.orbit_table["ltan"] == "10:30"
    assert m.attitude_table == {"mode": "nadir", "nadir_axis": "+z", "velocity_axis": "+x"}
    assert m.environment_table == {"case": "nominal"}
    assert {p.shape for p in m.parts} >= {"box", "rectangle", "cylinder", "dish", "mesh"}
    text = demo_model_path.read_text()
    assert m.source_text == text
    assert m.sha256 == hashlib.sha256(text.encode()).hexdigest()
    cam = m.part("camera")
    assert cam.parameters["file"].endswith("camera.stl")
    assert cam.parameters["scale"] == pytest.approx(0.001, rel=1e-15)


def test_defaults():
    m = load(COATING + PLATE)
    assert m.name == "m"                                  # file stem
    r = m.radiation
    assert (r.rays_per_node, r.seed, r.target_error) == (200_000, 1, None)
    assert r.max_rays_per_node == 20 * r.rays_per_node
    p = m.parts[0]
    assert p.center == (0.0, 0.0, 0.0) and p.z_axis == (0.0, 0.0, 1.0)
    assert p.x_axis == (1.0, 0.0, 0.0) and p.back is None
    assert p.front.nodes == "single" and p.front.node is None
    c = m.coatings["w"]
    assert (c.solar_specular, c.ir_specular) == (0.0, 0.0)
    assert m.orbit_table is None and m.attitude_table is None and m.environment_table is None
    m2 = load(COATING + PLATE + "[radiation]\nrays_per_node = 1000\n")
    assert m2.radiation.max_rays_per_node == 20_000


def test_raw_tables_keep_unknown_keys():
    m = load(COATING + PLATE + '[orbit]\nfoo = 1\n[attitude]\nbar = "x"\n[environment]\nbaz = 2\n')
    assert m.orbit_table == {"foo": 1} and m.attitude_table == {"bar": "x"}
    assert m.environment_table == {"baz": 2}


def test_axes_are_normalised_and_orthogonalised():
    text = COATING + PLATE.replace('front', 'z_axis = [0, 0, 2]\nx_axis = [1, 1, 1]\nfront')
    p = load(text).parts[0]
    assert p.z_axis == (0.0, 0.0, 1.0)
    assert p.x_axis == pytest.approx((1 / math.sqrt(2), 1 / math.sqrt(2), 0.0), abs=1e-15)


@pytest.mark.parametrize("unit,factor", [("m", 1.0), ("cm", 0.01), ("mm", 0.001),
                                         ("in", 0.0254), ("ft", 0.3048)])
def test_length_units_convert_everything(unit, factor):
    text = (f'[model]\nlength_unit = "{unit}"\n' + COATING +
            '[[parts]]\nname = "c"\nshape = "cone"\nradius = 2.0\ntop_radius = 1.0\n'
            'length = 3.0\ncenter = [1, 2, 3]\nmax_edge = 0.5\nfront = { coating = "w" }\n'
            '[[parts]]\nname = "m"\nshape = "mesh"\nfile = "x.stl"\nscale = 2.0\n'
            'front = { coating = "w" }\n')
    m = load(text)
    c = m.part("c")
    assert c.parameters["radius"] == pytest.approx(2.0 * factor, rel=1e-15)
    assert c.parameters["top_radius"] == pytest.approx(1.0 * factor, rel=1e-15)
    assert c.parameters["length"] == pytest.approx(3.0 * factor, rel=1e-15)
    assert c.center == pytest.approx((factor, 2 * factor, 3 * factor), rel=1e-15)
    assert c.max_edge == pytest.approx(0.5 * factor, rel=1e-15)
    assert m.part("m").parameters["scale"] == pytest.approx(2.0 * factor, rel=1e-15)


def test_missing_file_is_model_error(tmp_path):
    with pytest.raises(ModelError, match="cannot read"):
        load_model(tmp_path / "nope.toml")


# One bad model per error class: each raises ModelError naming the file, the location
# and the bad value.
BAD = [
    ("[model]\nname = 'x'\ncolour = 'red'\n" + COATING + PLATE, "[model] colour", "colour"),
    ("[extras]\na = 1\n" + COATING + PLATE, "[extras]", "extras"),
    (COATING + PLATE + "[radiation]\nrays = 5\n", "[radiation] rays", "rays"),
    (COATING + PLATE + "[radiation]\nrays_per_node = -5\n", "rays_per_node", "-5"),
    (COATING + PLATE + "[radiation]\nseed = 1.5\n", "seed", "1.5"),
    (COATING + PLATE + "[radiation]\ntarget_error = 2.0\n", "target_error", "2.0"),
    (COATING + PLATE + "[radiation]\nseed = 18446744073709551616\n", "seed",
     "18446744073709551616"),
    (COATING + PLATE + "[radiation]\nrays_per_node = 1000\nmax_rays_per_node = 10\n",
     "max_rays_per_node", "10 < 1000"),
    (COATING.replace("0.2", "1.2") + PLATE, "solar_absorptivity", "1.2"),
    (COATING.replace("0.8", "-0.1") + PLATE, "ir_emissivity", "-0.1"),
    (COATING + "gloss = 3\n" + PLATE, "[coatings.w] gloss", "gloss"),
    ("[coatings.w]\nsolar_absorptivity = 0.3\n" + PLATE, "ir_emissivity", "missing"),
    (COATING + PLATE.replace('"w"', '"paint"'), "part 'plate' front coating", "paint"),
    (COATING + PLATE.replace("rectangle", "hexagon"), "part 'plate' shape", "hexagon"),
    (COATING + PLATE.replace("size", "sise"), "part 'plate'", "sise"),
    (COATING + PLATE.replace("size = [1.0, 2.0]", "size = [1.0]"), "size", "[1.0]"),
    (COATING + PLATE.replace("size = [1.0, 2.0]", "size = [1.0, -2.0]"), "size", "-2.0"),
    (COATING + PLATE.replace("size = [1.0, 2.0]", "size = [1.0, 2.0]\ncenter = [nan, 0, 0]"),
     "center", "nan"),
    (COATING + PLATE.replace("size = [1.0, 2.0]", "size = [1.0, 2.0]\nx_axis = [0, 0, 3]"),
     "x_axis", "parallel"),
    (COATING + PLATE.replace("size = [1.0, 2.0]", "size = [1.0, 2.0]\nz_axis = [0, 0, 0]"),
     "z_axis", "zero"),
    (COATING + PLATE.replace('{ coating = "w" }', '{ coating = "w", nodes = "lots" }'),
     "front nodes", "lots"),
    (COATING + PLATE.replace('{ coating = "w" }', '{ coating = "w", node = "a", nodes = "single" }'),
     "front", "not both"),
    (COATING + PLATE.replace('{ coating = "w" }', '{ coating = "w", colour = 1 }'),
     "front colour", "colour"),
    (COATING + PLATE + PLATE, "part 'plate'", "duplicate"),
    (COATING + PLATE.replace('name = "plate"\n', ""), "part #1", "name"),
    (COATING + PLATE.replace('shape = "rectangle"\n', ""), "part 'plate'", "shape"),
    (COATING + '[[parts]]\nname = "d"\nshape = "disk"\nradius = 1.0\ninner_radius = 1.5\n'
     'front = { coating = "w" }\n', "inner_radius", "1.5"),
    (COATING + '[[parts]]\nname = "s"\nshape = "sphere"\nfront = { coating = "w" }\n',
     "part 's'", "radius"),
    ('[model]\nlength_unit = "furlong"\n' + COATING + PLATE, "length_unit", "furlong"),
    (COATING + PLATE.replace("size = [1.0, 2.0]", "size = [1.0, 2.0]\nmax_edge = 1e-6"),
     "max_edge", "1e-06"),
    ("this is = not toml [", "", "not valid TOML"),
    (PLATE, "coating", "paint|coating"),
    (COATING, "[[parts]]", "no parts"),
]


@pytest.mark.parametrize("text,where,value", BAD)
def test_each_bad_model_is_one_clear_model_error(text, where, value):
    with pytest.raises(ModelError) as info:
        load(text)
    err = info.value
    line = str(err)
    assert "\n" not in line
    assert line.startswith("m.toml")                 # names the file
    assert where in line                             # names the location
    assert any(v in line for v in value.split("|"))  # shows the bad value or key


def test_collecting_mode_reports_every_problem():
    text = ("[model]\ncolour = 1\n" + COATING.replace("0.2", "7") +
            '[coatings.ok]\nsolar_absorptivity = 0.5\nir_emissivity = 0.5\n' +
            PLATE.replace('"w"', '"ok"') + PLATE.replace("plate", "p2").replace("rectangle", "blob"))
    problems = []
    m = load(text, problems=problems)
    lines = [p.line() for p in problems]
    assert len(lines) == 3, lines
    assert any("colour" in x for x in lines)
    assert any("solar_absorptivity" in x and "7" in x for x in lines)
    assert any("blob" in x for x in lines)
    assert [p.name for p in m.parts] == ["plate"]    # the usable part is kept
    assert all(p.severity == "error" for p in problems)


def test_part_with_no_side_is_a_warning_only():
    problems = []
    m = load(COATING + PLATE.replace('front = { coating = "w" }\n', ""), problems=problems)
    assert [p.severity for p in problems] == ["warning"]
    assert m.parts[0].front is None and m.parts[0].back is None


# ----------------------------------------------------------------------------------------
# Property-based: random documents end in a Model or a ModelError, nothing else
# ----------------------------------------------------------------------------------------

_KEYS = ["name", "shape", "size", "radius", "inner_radius", "top_radius", "length", "depth",
         "caps", "segments", "center", "z_axis", "x_axis", "max_edge", "front", "back",
         "file", "scale", "closed", "coating", "node", "nodes", "junk"]
_scalars = st.one_of(
    st.none(), st.booleans(), st.integers(-10, 10**6),
    st.floats(allow_nan=True, allow_infinity=True, width=64),
    st.floats(0.05, 5.0), st.sampled_from(SHAPES + ("w", "single", "per-face", "per-facet",
                                                    "per-group", "x.stl", "")),
    st.text(max_size=8),
)
_values = st.recursive(
    _scalars,
    lambda inner: st.one_of(st.lists(inner, max_size=4),
                            st.dictionaries(st.sampled_from(_KEYS), inner, max_size=4)),
    max_leaves=12,
)


def _strip_none(x):
    if isinstance(x, dict):
        return {k: _strip_none(v) for k, v in x.items() if v is not None}
    if isinstance(x, list):
        return [_strip_none(v) for v in x if v is not None]
    return x


_part = st.fixed_dictionaries(
    {"name": st.text(min_size=1, max_size=6), "shape": st.sampled_from(SHAPES + ("blob",))},
    optional={k: _values for k in _KEYS if k not in ("name", "shape")}
    | {"front": st.fixed_dictionaries({"coating": st.sampled_from(["w", "v"])},
                                      optional={"nodes": st.sampled_from(
                                          ["single", "per-face", "per-facet", "per-group",
                                           "bad"]),
                                          "node": st.text(max_size=5)})},
)
_document = st.fixed_dictionaries(
    {"coatings": st.dictionaries(st.sampled_from(["w", "v"]),
                                 st.dictionaries(st.sampled_from(
                                     ["solar_absorptivity", "ir_emissivity", "solar_specular",
                                      "ir_specular", "source", "junk"]), _scalars,
                                     max_size=5), max_size=2),
     "parts": st.lists(_part, max_size=3)},
    optional={"model": st.dictionaries(st.sampled_from(["name", "length_unit", "junk"]),
                                       st.one_of(_scalars, st.sampled_from(["m", "in"]))),
              "radiation": st.dictionaries(st.sampled_from(
                  ["rays_per_node", "seed", "target_error", "max_rays_per_node", "smoothing",
                   "junk"]), _scalars),
              "orbit": st.dictionaries(st.text(max_size=5), _scalars, max_size=3),
              "junk": _values},
)

# 100 examples; no deadline, since a busy shared machine may stall any single example
_SETTINGS = settings(max_examples=100, deadline=None, derandomize=True,
                     suppress_health_check=[HealthCheck.too_slow])


@_SETTINGS
@given(_document)
def test_random_part_tables_load_or_raise_model_error(doc):
    text = tomli_w.dumps(_strip_none(doc))
    collected = []
    load(text, problems=collected)              # collecting mode never raises
    try:
        model = load(text)
    except ModelError as err:
        assert "\n" not in str(err)
        # strict mode stops at the first error the collecting mode also found
        assert any(p.severity == "error" for p in collected)
        return
    assert model.parts is not None
    # the collecting mode must agree: no error problems for a model that loads strictly
    problems = []
    load(text, problems=problems)
    assert not [p for p in problems if p.severity == "error"]


@_SETTINGS
@given(st.lists(st.sampled_from(list('[]=."\'\n #abcxyz019-_,{}') +
                ["parts", "coatings", "shape", "true", "nan", "[[parts]]\n", "name = ",
                 "\x00", "\ud7ff"]), max_size=40).map("".join))
def test_random_text_loads_or_raises_model_error(text):
    try:
        load(text)
    except ModelError:
        pass
    problems = []
    load(text, problems=problems)      # collecting mode never raises


def test_near_misses_get_a_suggestion():
    with pytest.raises(ModelError, match="did you mean 'size'"):
        load(COATING + PLATE.replace("size", "sise"))
    with pytest.raises(ModelError, match="did you mean 'sphere'"):
        load(COATING + PLATE.replace("rectangle", "sphear"))
    with pytest.raises(ModelError, match="did you mean 'radiation'"):
        load(COATING + PLATE + "[radiaton]\nseed = 2\n")


def test_ray_limits_agree_with_the_kernels():
    # model.py keeps copies so that reading a model imports no numba; they must agree
    from vfactor import model, radiation
    from vfactor.tracing import vf_kernels

    assert model.MIN_ROUNDS == radiation.MIN_ROUNDS
    assert model.MAX_RAYS_PER_ROUND == vf_kernels.MAX_RAYS_PER_ROUND - 1
    assert model.MAX_ROUNDS == vf_kernels.MAX_ROUNDS
    assert (model.GROWTH_STEP, model.GROWTH_CAP, model.GROWTH_LIMIT) == (
        vf_kernels.GROWTH_STEP, vf_kernels.GROWTH_CAP, vf_kernels.GROWTH_LIMIT)


def test_ray_limit_problem_bounds():
    from vfactor.model import MAX_RAYS_PER_ROUND, MIN_ROUNDS, ray_limit_problem

    assert ray_limit_problem(200_000, 4_000_000) == ""
    assert ray_limit_problem(10 ** 9, 2 * 10 ** 10) == ""   # 160 rounds of 1.25e8: 2.5e18
    # 8 rounds of 2**32 - 1 rays fit the ray index, but not the int64 sums of squares
    top = MIN_ROUNDS * MAX_RAYS_PER_ROUND
    assert "64-bit sums" in ray_limit_problem(top, top)
    assert "32-bit ray index" in ray_limit_problem(top + MIN_ROUNDS, top + MIN_ROUNDS)


def test_allow_outside_files_is_read_and_checked():
    model = load(COATING + PLATE + "[model]\nallow_outside_files = true\n")
    assert model.allow_outside_files is True
    assert load(COATING + PLATE).allow_outside_files is False
    with pytest.raises(ModelError, match=r"\[model\] allow_outside_files: must be true or"):
        load(COATING + PLATE + "[model]\nallow_outside_files = \"yes\"\n")


@pytest.mark.parametrize("bad, where", [
    ('[coatings."a\\tb"]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n',
     "[coatings.'a\\tb']"),
    ('[model]\nname = "x\\n"\n', "[model] name"),
])
def test_names_with_control_characters_are_errors_on_one_line(bad, where):
    with pytest.raises(ModelError) as info:
        load(COATING + PLATE + bad)
    message = str(info.value)
    assert where in message and "printable" in message and "\n" not in message
