"""The arm file loader refuses a bad file with one line: "<file>: <key>: <problem>".

Outside facts used: TOML 1.0 (toml.io, from memory) has the float values ``nan`` and
``inf``, requires UTF-8, and arrays of tables ``[[joints]]``; Python's tomllib reads it
(the standard library's TOML 1.0 reader). The DH shape rules are CONTRACT.md's.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import BUILTIN_ARMS, builtin_arm, load_arm
from benchjog.kinematics.armspec import ArmSpecError, arm_from_mapping

JOINT = dict(name="shoulder", type="revolute", a=250.0, alpha=0.0, d=0.0, offset=0.0,
             min=-160.0, max=160.0, max_speed=120.0, counts_per_unit=100.0, zero=0.0,
             direction=1)

PLANAR = {"arm": {"name": "bench", "geometry": "planar"},
          "joints": [dict(JOINT), dict(JOINT, name="elbow", a=150.0, min=-150.0, max=150.0)]}

SCARA = {"arm": {"name": "bench-scara", "geometry": "scara"},
         "joints": [dict(JOINT, name="j1", a=200.0, d=180.0),
                    dict(JOINT, name="j2", a=150.0, alpha=180.0),
                    dict(JOINT, name="quill", type="prismatic", a=0.0, min=0.0, max=120.0),
                    dict(JOINT, name="roll", a=0.0, d=40.0, min=-180.0, max=180.0)],
         "zones": [{"name": "post", "kind": "circle", "cx": 100.0, "cy": 0.0, "r": 20.0,
                    "z_min": 0.0, "z_max": 90.0}]}


def toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(value)


def to_toml(data: dict) -> str:
    """A small TOML writer for these tests: top-level tables and arrays of tables."""
    lines = []
    for key, value in data.items():
        if isinstance(value, dict):
            lines.append(f"[{key}]")
            lines += [f"{k} = {toml_value(v)}" for k, v in value.items()]
        elif isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
            for table in value:
                lines.append(f"[[{key}]]")
                lines += [f"{k} = {toml_value(v)}" for k, v in table.items()]
        else:
            lines.insert(0, f"{key} = {toml_value(value)}")
        lines.append("")
    return "\n".join(lines)


def write(tmp_path: Path, data: dict | str | bytes, name: str = "arm.toml") -> Path:
    path = tmp_path / name
    if isinstance(data, bytes):
        path.write_bytes(data)
    else:
        path.write_text(data if isinstance(data, str) else to_toml(data), encoding="utf-8")
    return path


def refusal(path: Path) -> str:
    with pytest.raises(ArmSpecError) as info:
        load_arm(path)
    message = str(info.value)
    assert "\n" not in message
    return message


def edit(base: dict, change) -> dict:
    data = copy.deepcopy(base)
    change(data)
    return data


def set_joint(i, key, value):
    def change(data):
        data["joints"][i][key] = value
    return change


def drop_joint_key(i, key):
    def change(data):
        del data["joints"][i][key]
    return change


CASES = [
    # (id, base, change, key, words in the problem)
    ("no arm table", PLANAR, lambda d: d.pop("arm"), "arm", "missing"),
    ("no name", PLANAR, lambda d: d["arm"].pop("name"), "arm.name", "missing"),
    ("no geometry", PLANAR, lambda d: d["arm"].pop("geometry"), "arm.geometry", "missing"),
    ("no joints", PLANAR, lambda d: d.pop("joints"), "joints", "missing"),
    ("missing a", PLANAR, drop_joint_key(1, "a"), "joints[1].a", "missing"),
    ("missing max", PLANAR, drop_joint_key(0, "max"), "joints[0].max", "missing"),
    ("text for a number", PLANAR, set_joint(1, "max", "lots"), "joints[1].max",
     "not a number ('lots')"),
    ("bool for a number", PLANAR, set_joint(0, "a", True), "joints[0].a", "not a number (True)"),
    ("array for a number", PLANAR, set_joint(0, "d", [1.0]), "joints[0].d", "not a number"),
    ("number for a name", PLANAR, set_joint(0, "name", 5), "joints[0].name",
     "must be a non-empty string"),
    ("nan", PLANAR, set_joint(0, "min", math.nan), "joints[0].min", "not a finite number (nan)"),
    ("inf", PLANAR, set_joint(1, "max_speed", math.inf), "joints[1].max_speed",
     "not a finite number (inf)"),
    ("-inf", PLANAR, set_joint(1, "offset", -math.inf), "joints[1].offset", "not a finite number"),
    ("min above max", PLANAR, set_joint(0, "min", 170.0), "joints[0].min",
     "must be below max (170 >= 160)"),
    ("min equal max", PLANAR, set_joint(0, "min", 160.0), "joints[0].min", "must be below max"),
    ("zero link", PLANAR, set_joint(1, "a", 0.0), "joints[1].a", "link length must be > 0 (0)"),
    ("negative link", PLANAR, set_joint(0, "a", -5.0), "joints[0].a",
     "link length must be > 0 (-5)"),
    ("unknown geometry", PLANAR, lambda d: d["arm"].update(geometry="delta"), "arm.geometry",
     "unknown geometry 'delta'"),
    ("prismatic in a planar arm", PLANAR, set_joint(1, "type", "prismatic"), "joints[1].type",
     "a planar arm needs a revolute joint here, not prismatic"),
    ("revolute quill", SCARA, set_joint(2, "type", "revolute"), "joints[2].type",
     "a scara arm needs a prismatic joint here, not revolute"),
    ("unknown joint type", PLANAR, set_joint(0, "type", "spherical"), "joints[0].type",
     "must be 'revolute' or 'prismatic'"),
    ("three joints on a planar arm", PLANAR,
     lambda d: d["joints"].append(dict(JOINT, name="wrist")), "joints",
     "a planar arm has 2 joints, not 3"),
    ("two joints on a scara", SCARA, lambda d: d["joints"].pop(), "joints",
     "a scara arm has 4 joints, not 3"),
    ("planar alpha", PLANAR, set_joint(1, "alpha", 90.0), "joints[1].alpha",
     "must be 0 for a planar arm (90)"),
    ("scara alpha", SCARA, set_joint(1, "alpha", 0.0), "joints[1].alpha",
     "must be 180 for a scara arm (0)"),
    ("scara quill with a link", SCARA, set_joint(2, "a", 10.0), "joints[2].a",
     "must be 0 for a scara arm"),
    ("direction 2", PLANAR, set_joint(0, "direction", 2), "joints[0].direction",
     "must be 1 or -1 (2)"),
    ("direction 0", PLANAR, set_joint(1, "direction", 0), "joints[1].direction",
     "must be 1 or -1 (0)"),
    ("direction 0.5", PLANAR, set_joint(1, "direction", 0.5), "joints[1].direction",
     "must be 1 or -1"),
    ("zero speed", PLANAR, set_joint(0, "max_speed", 0.0), "joints[0].max_speed", "must be at least 0.01"),
    ("crawling speed", PLANAR, set_joint(0, "max_speed", 1e-300), "joints[0].max_speed",
     "must be at least 0.01"),
    ("home beyond the limits", PLANAR, set_joint(1, "zero", 1e300), "joints[1].zero",
     "the home pose (count 0) must lie within min..max"),
    ("a 400-digit integer", PLANAR, set_joint(0, "a", 10 ** 400), "joints[0].a",
     "not a finite number (too large)"),
    ("alpha nearly 180", SCARA, set_joint(1, "alpha", 179.999999), "joints[1].alpha",
     "must be 180 for a scara arm (179.999999)"),
    ("limits of many turns", PLANAR, set_joint(0, "max", 1e300), "joints[0].max",
     "must lie within +/-720 deg"),
    ("zero counts", PLANAR, set_joint(0, "counts_per_unit", 0.0), "joints[0].counts_per_unit",
     "must be > 0"),
    ("joints not an array", PLANAR, lambda d: d.update(joints=3), "joints",
     "must be an array of tables"),
    ("zone of unknown kind", SCARA, lambda d: d["zones"][0].update(kind="cone"), "zones[0].kind",
     "must be 'box' or 'circle' ('cone')"),
    ("zone radius 0", SCARA, lambda d: d["zones"][0].update(r=0.0), "zones[0].r", "must be > 0"),
    ("zone radius nan", SCARA, lambda d: d["zones"][0].update(r=math.nan), "zones[0].r",
     "not a finite number"),
    ("zone without a centre", SCARA, lambda d: d["zones"][0].pop("cx"), "zones[0].cx", "missing"),
    ("zone upside down", SCARA, lambda d: d["zones"][0].update(z_min=95.0), "zones[0].z_min",
     "must be below z_max (95 >= 90)"),
    ("box inside out", PLANAR, lambda d: d.update(zones=[{"kind": "box", "x_min": 5.0,
                                                          "x_max": -5.0, "y_min": 0.0,
                                                          "y_max": 1.0}]),
     "zones[0].x_min", "must be below x_max (5 >= -5)"),
    ("singularity threshold 90", PLANAR, lambda d: d["arm"].update(singularity_warn_deg=90.0),
     "arm.singularity_warn_deg", "must be below 90"),
    ("negative clearance", PLANAR, lambda d: d["arm"].update(link_clearance=-1.0),
     "arm.link_clearance", "must be >= 0"),
    # a misspelling of a key benchjog reads is refused (silently dropped, a clearance or
    # a zone would go unchecked); a key of a site's own is allowed (test below)
    ("misspelt clearance", PLANAR, lambda d: d["arm"].update(link_clearence=12.0),
     "arm.link_clearence", "unknown key (did you mean link_clearance?)"),
    ("zone for zones", PLANAR, lambda d: d.update(zone=[{"kind": "circle", "cx": 0.0, "cy": 0.0,
                                                         "r": 5.0}]),
     "zone", "unknown key (did you mean zones?)"),
    ("misspelt max_speed", PLANAR, lambda d: d["joints"][0].update(max_sped=d["joints"][0].pop("max_speed")),
     "joints[0].max_sped", "unknown key (did you mean max_speed?)"),
    ("misspelt zone key", PLANAR, lambda d: d.update(zones=[{"kind": "box", "x_min": 0.0, "x_max": 1.0,
                                                             "y_min": 0.0, "y_max": 1.0, "z_maxx": 9.0}]),
     "zones[0].z_maxx", "unknown key (did you mean z_max?)"),
    ("jog session box of zero", PLANAR, lambda d: d["arm"].update(jog_session_box=0.0),
     "arm.jog_session_box", "must be > 0"),
    ("jog session idle as text", PLANAR, lambda d: d["arm"].update(jog_session_idle="long"),
     "arm.jog_session_idle", "not a number"),
    ("jog session roll infinite", SCARA, lambda d: d["arm"].update(jog_session_roll=math.inf),
     "arm.jog_session_roll", "not a finite number"),
]


@pytest.mark.parametrize("base,change,key,words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_file_is_refused_with_file_key_and_problem(tmp_path, base, change, key, words):
    path = write(tmp_path, edit(base, change))
    message = refusal(path)
    assert message.startswith(f"{path}: {key}: "), message
    assert words in message.split(": ", 2)[2]


def test_arm_not_a_table(tmp_path):
    path = write(tmp_path, 'arm = "planar"\n')
    assert refusal(path) == f"{path}: arm: must be a table"


def test_not_utf8(tmp_path):
    path = write(tmp_path, to_toml(PLANAR).replace("bench", "b\xe9nch").encode("latin-1"))
    assert refusal(path) == f"{path}: file: not UTF-8 text"


def test_toml_syntax_error(tmp_path):
    path = write(tmp_path, "[arm]\nname = \"x\"\ngeometry = planar\n")
    message = refusal(path)
    assert message.startswith(f"{path}: toml: ")
    assert "line 3" in message  # tomllib names the line


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere.toml"
    assert refusal(path) == f"{path}: file: No such file or directory"


def test_a_directory_is_not_an_arm_file(tmp_path):
    message = refusal(tmp_path)
    assert message.startswith(f"{tmp_path}: file: ")


def test_mapping_errors_name_the_source():
    with pytest.raises(ArmSpecError) as info:
        arm_from_mapping(edit(PLANAR, set_joint(0, "a", math.nan)), "mine.toml")
    assert str(info.value) == "mine.toml: joints[0].a: not a finite number (nan)"
    assert (info.value.source, info.value.key) == ("mine.toml", "joints[0].a")


@pytest.mark.parametrize("name", BUILTIN_ARMS)
def test_both_builtin_arms_load(name):
    arm = builtin_arm(name)
    assert arm.name == name
    assert load_arm(name) == arm
    assert arm.geometry == ("scara" if name.startswith("scara") else "planar")
    # the home pose (every axis at count 0) is within the soft limits
    for joint, value in zip(arm.joints, arm.home_joints):
        assert joint.min <= value <= joint.max


def test_builtin_files_load_as_user_files(tmp_path):
    from importlib import resources
    for name in BUILTIN_ARMS:
        text = resources.files("benchjog.console.cell.arms").joinpath(f"{name}.toml").read_text("utf-8")
        path = write(tmp_path, text, f"{name}.toml")
        arm = load_arm(path)
        assert arm.joints == builtin_arm(name).joints and arm.source == str(path)


def test_default_is_the_planar_demo():
    assert load_arm(None).name == "planar-bench"


def test_unknown_builtin_name_is_refused():
    with pytest.raises(ArmSpecError, match="no built-in arm of that name"):
        builtin_arm("hexapod")


def test_user_written_file_loads_with_units_converted(tmp_path):
    path = write(tmp_path, edit(SCARA, lambda d: d["arm"].update(singularity_warn_deg=3.0)))
    arm = load_arm(path)
    assert arm.source == str(path) and arm.geometry == "scara" and arm.n_joints == 4
    j1, j2, quill, roll = arm.joints
    # degrees in the file, radians inside; mm stay mm
    assert j1.min == pytest.approx(math.radians(-160.0))
    assert j2.alpha_rad == pytest.approx(math.pi)
    assert quill.max == 120.0 and quill.unit == "mm"
    assert roll.d_mm == 40.0
    assert arm.singularity_warn_rad == pytest.approx(math.radians(3.0))
    assert j1.max_speed == pytest.approx(math.radians(120.0))
    assert j1.max_accel == pytest.approx(4 * math.radians(120.0))  # default 4 x max_speed
    (zone,) = arm.zones
    assert (zone.kind, zone.cx, zone.r, zone.z_max) == ("circle", 100.0, 20.0, 90.0)


def test_integers_are_accepted_where_numbers_are_wanted(tmp_path):
    path = write(tmp_path, edit(PLANAR, set_joint(0, "a", 250)))
    assert load_arm(path).link1_mm == 250.0


def test_scara_alpha_minus_180_is_the_same_table(tmp_path):
    path = write(tmp_path, edit(SCARA, set_joint(1, "alpha", -180.0)))
    assert load_arm(path).joints[1].alpha_rad == pytest.approx(-math.pi)


def test_extra_keys_are_allowed(tmp_path):
    # CONTRACT.md, "Arm file": "Required keys (more are allowed)".
    text = (Path(__file__).resolve().parents[1] / "console" / "cell" / "arms" / "planar-bench.toml").read_text()
    text = text.replace('name = "shoulder"', 'name = "shoulder"\npart_number = "SH-1"', 1)
    text = text.replace('[arm]', '[arm]\ncell = "bench 3"', 1)
    path = tmp_path / "extra.toml"
    text = text.replace('[[zones]]', '[[zones]]\nreason = "parts tray"', 1)
    path.write_text(text)
    assert load_arm(path).joints[0].name == "shoulder"
