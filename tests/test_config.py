"""Config loading: defaults, files, overrides and the one-line errors for bad values."""

from __future__ import annotations

from pathlib import Path

import pytest

from synthgen.config import Config, load_config, parse_override, to_dict
from synthgen.errors import ConfigError, InputFileError


def test_defaults_are_a_valid_config():
    """No file and no overrides gives the built-in defaults."""
    assert load_config() == Config()


def test_file_then_overrides_in_order(tmp_path):
    """--set overrides win over the file, later overrides over earlier ones."""
    path = tmp_path / "c.toml"
    path.write_text("count = 3\n[canvas]\nwidth = 100\n")
    cfg = load_config(path, ["canvas.width=200", "canvas.width=300", "objects.count=[5, 10]"])
    assert (cfg.count, cfg.canvas.width, cfg.objects.count) == (3, 300, (5, 10))


def test_scalar_means_a_one_point_range():
    """A single number for a [min, max] key means [v, v]."""
    assert load_config(overrides=["objects.size=16"]).objects.size == (16.0, 16.0)


def test_bare_word_override_is_a_string():
    """Names need no quotes on the command line."""
    assert parse_override("background.kind=checker") == ("background.kind", "checker")


def test_resolved_config_is_plain_data():
    """to_dict gives lists for tuples, so it can go into JSON."""
    d = to_dict(load_config(overrides=["objects.count=[1, 2]"]))
    assert d["objects"]["count"] == [1, 2] and d["canvas"]["width"] == 640


@pytest.mark.parametrize(
    ("override", "pattern"),
    [
        ("objects.sizes=[1, 2]", r"'objects.sizes' is not a known key .*did you mean 'objects.size'"),
        ("canvas.widht=100", r"'canvas.widht' is not a known key .*did you mean 'canvas.width'"),
        ("canvas.width=\"wide\"", r"'canvas.width' must be a whole number \(got 'wide'\)"),
        ("canvas.width=0", r"'canvas.width' must be a whole number in \[1, 16384\] \(got 0\)"),
        ("canvas.width=100000", r"'canvas.width' must be a whole number in \[1, 16384\]"),
        ("objects.size=[8, 4]", r"'objects.size' must be \[min, max\] with 0 < min <= max .*\(got \[8.0, 4.0\]\)"),
        ("objects.size=[0, 4]", r"'objects.size' must be \[min, max\] with 0 < min"),
        ("objects.count=[-1, 4]", r"'objects.count' must be \[min, max\]"),
        ("objects.min_visible=1.5", r"'objects.min_visible' must be a number in \[0, 1\] \(got 1.5\)"),
        ("objects.shapes=[]", r"'objects.shapes' must name at least one of"),
        ("objects.shapes=[\"elipse\"]", r"'objects.shapes' must be one of .*did you mean 'ellipse'"),
        ("objects.size_law=\"normal\"", r"'objects.size_law' must be one of uniform, log-uniform"),
        ("objects.rotate=1", r"'objects.rotate' must be true or false"),
        ("count=0", r"'count' must be a whole number in \[1, "),
        ("objects.min_contrast=nan", r"'objects.min_contrast' must be a finite number \(got nan\)"),
        ("output.image_format=\"gif\"", r"'output.image_format' must be one of png, jpeg"),
        ("canvas=3", r"'canvas' must be a table"),
        ("canvas.width.x=3", r"'canvas.width' must be a whole number"),
    ],
)
def test_bad_values_name_the_key_rule_and_value(override, pattern):
    """Each kind of bad value gives one ConfigError naming the dotted key."""
    with pytest.raises(ConfigError, match=pattern) as info:
        load_config(overrides=[override])
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("text", ["canvas.width", "=3", "1abc=3", "canvas.width=[1,"])
def test_malformed_override_syntax(text):
    """An override that is not KEY=VALUE with a TOML value is refused."""
    with pytest.raises(ConfigError):
        load_config(overrides=[text])


def test_missing_file_names_the_file(tmp_path):
    """A config path that does not exist is an input-file error naming it."""
    with pytest.raises(InputFileError, match="nope.toml: config file does not exist"):
        load_config(tmp_path / "nope.toml")


def test_binary_junk_is_refused(tmp_path):
    """Bytes that are not UTF-8 text are refused before TOML parsing."""
    path = tmp_path / "junk.toml"
    path.write_bytes(bytes(range(256)))
    with pytest.raises(InputFileError, match="junk.toml: is not a UTF-8 text file"):
        load_config(path)


def test_invalid_toml_is_refused(tmp_path):
    """A syntax error in the file names the file and the position."""
    path = tmp_path / "bad.toml"
    path.write_text("[canvas\nwidth = 3\n")
    with pytest.raises(InputFileError, match=r"bad.toml: is not valid TOML"):
        load_config(path)


_PRESETS = sorted((Path(__file__).parent.parent / "configs").glob("*.toml"))


def _flat(d: dict, prefix: str = "") -> dict:
    out = {}
    for k, v in d.items():
        out.update(_flat(v, f"{prefix}{k}.") if isinstance(v, dict) else {prefix + k: v})
    return out


def test_configs_directory_holds_the_presets():
    """The demo, tiny and three sweep presets are shipped (so the check below is not over an empty list)."""
    assert {"demo.toml", "tiny.toml", "sweep-size.toml", "sweep-overlap.toml", "sweep-crowd.toml"} <= {
        p.name for p in _PRESETS
    }


@pytest.mark.parametrize("path", _PRESETS, ids=lambda p: p.name)
def test_shipped_presets_load(path):
    """Every preset in configs/ is a valid config, and every key it sets is the resolved value."""
    import tomllib

    given = _flat(tomllib.loads(path.read_text(encoding="utf-8")))
    resolved = _flat(to_dict(load_config(path)))
    assert given
    for key, value in given.items():
        # RULES.md conventions: a scalar v given for a [min, max] range means [v, v]
        assert resolved[key] in (value, [value, value], list(value) if isinstance(value, list) else value), key


@pytest.mark.parametrize(
    ("overrides", "room"),
    [
        (["canvas.width=64", "canvas.height=64"], 4096),  # objects.min_area = 1 px^2 each
        (["canvas.width=64", "canvas.height=64", "objects.min_area=0"], 65536),  # one of 4 x 4 samples each
        (["canvas.width=64", "canvas.height=48", "objects.min_area=2.5"], 1228),
    ],
)
def test_more_objects_than_the_canvas_can_show_is_refused(overrides, room):
    """objects.count beyond what the canvas can ever show annotated is one error naming the key and the canvas."""
    assert load_config(overrides=[*overrides, f"objects.count=[{room},{room}]"]).objects.count[0] == room
    message = (
        rf"config key 'objects.count' must ask for at most {room} objects per image "
        rf"on a 64x\d\d canvas \(each annotated object needs .*\) \(got \[{room + 1}, {room + 1}\]\)"
    )
    with pytest.raises(ConfigError, match=message):
        load_config(overrides=[*overrides, f"objects.count=[{room + 1},{room + 1}]"])


def test_dropped_objects_policy_is_checked():
    """objects.dropped takes "ignore" (the default) or "erase"; anything else names the choices."""
    assert load_config().objects.dropped == "ignore"
    assert load_config(overrides=["objects.dropped=erase"]).objects.dropped == "erase"
    with pytest.raises(ConfigError, match="objects.dropped"):
        load_config(overrides=["objects.dropped=hide"])
