"""The daemon's configuration: defaults, the example file, unit conversions, errors, overrides.

Every error test checks that the message names the key, the value seen and what is allowed.
"""

from __future__ import annotations

import dataclasses
import tomllib
import typing
from pathlib import Path

import pytest

from taprig.daemon import config as cfgmod
from taprig.daemon.config import (
    CHANNEL_SETTINGS,
    SETTINGS,
    AcceptMode,
    Config,
    Kind,
    Setting,
    StreamFormat,
    TriggerSlope,
    load_config,
)
from taprig.daemon.errors import ConfigError
from taprig.daemon.records import ChannelSpec, Role
from taprig.firmware_protocol.simpiece import demo_panel
from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings

EXAMPLE = Path(__file__).resolve().parents[2] / "deploy" / "taprigd.example.toml"

G_N = 9.80665
"""Standard acceleration of free fall, m/s², exact by definition: 3rd CGPM (1901),
"Declaration on the unit of mass and on the definition of weight"; restated in
ISO 80000-3:2019 (Quantities and units, part 3: space and time). Typed in here from those
sources, not taken from the module under test."""

CHANNELS_3 = """
[[channels]]
index = 0
role = "force"
label = "hammer"
sensitivity = 2.25
unit = "mV/N"

[[channels]]
index = 1
role = "response"
label = "acc1"
sensitivity = 10.0
unit = "mV/g"

[[channels]]
index = 2
role = "response"
label = "acc2"
sensitivity = 1.02
unit = "mV/(m/s^2)"
"""


def write(tmp_path: Path, text: str, name: str = "taprigd.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def load_text(tmp_path: Path, text: str, *overrides: str) -> Config:
    return load_config(write(tmp_path, text), overrides, environ={})


def error_of(tmp_path: Path, text: str, *overrides: str) -> str:
    with pytest.raises(ConfigError) as info:
        load_text(tmp_path, text, *overrides)
    return str(info.value)


def section_of(config: Config, setting: Setting) -> object:
    return getattr(getattr(config, setting.section), setting.key)


# --- the table, the dataclasses and the defaults


def test_table_and_dataclasses_declare_the_same_fields_and_types() -> None:
    """Each section dataclass has exactly the table's keys, with types that match the kinds."""
    kind_types: dict[Kind, object] = {
        Kind.INT: int,
        Kind.FLOAT: float,
        Kind.STR: str,
        Kind.BOOL: bool,
        Kind.PATH: Path,
        Kind.FLOAT_OR_NONE: float | None,
    }
    for section, cls in cfgmod._SECTION_TYPES.items():
        hints = typing.get_type_hints(cls)
        declared = [s for s in SETTINGS if s.section == section]
        assert [f.name for f in dataclasses.fields(cls)] == [s.key for s in declared]
        for s in declared:
            want = s.choices if s.kind is Kind.CHOICE else kind_types[s.kind]
            assert hints[s.key] == want, s.name
            # a default must itself pass the setting's own check
            assert s.check is None or s.check(s.default), s.name


def test_defaults_load_without_a_file() -> None:
    """No file, no overrides: every value is the table's default, channels are the simulated
    instrument's (labels and sensitivities compared with the instrument's own settings)."""
    config = load_config(None, environ={})
    for s in SETTINGS:
        assert section_of(config, s) == s.default, s.name
    assert config.source is None
    assert config.device.is_simulated
    inst = InstrumentSettings()
    labels = ("hammer", *demo_panel().sensors.keys())
    assert tuple(c.label for c in config.channels) == labels
    assert [c.index for c in config.channels] == list(range(len(labels)))
    assert config.force_channel.sensitivity == inst.hammer_mv_per_n
    assert config.force_channel.sensitivity_unit == "mV/N"
    assert all(c.sensitivity == inst.accel_mv_per_ms2 for c in config.response_channels)
    assert all(c.sensitivity_unit == "mV/(m/s^2)" for c in config.response_channels)


def test_config_is_frozen() -> None:
    config = load_config(None, environ={})
    with pytest.raises(dataclasses.FrozenInstanceError):
        config.capture.block = 1024  # type: ignore[misc]


# --- the example file


def test_example_file_loads_to_the_defaults() -> None:
    """The example lists every default, so it must load to what no file at all gives."""
    assert load_config(EXAMPLE, environ={}) == load_config(None, environ={})


def test_example_file_has_every_setting_and_no_other() -> None:
    with EXAMPLE.open("rb") as f:
        doc = tomllib.load(f)
    channels = doc.pop("channels")
    keys = {f"{section}.{key}" for section, body in doc.items() for key in body}
    assert keys == {s.name for s in SETTINGS}
    required = {s.key for s in CHANNEL_SETTINGS if s.default is None}
    for table in channels:  # the hammer has no place; each response shows both place keys
        every = {s.key for s in CHANNEL_SETTINGS} if table["role"] == "response" else required
        assert set(table) == every, table


def comment_above(lines: list[str], section: str, key: str) -> str:
    """The comment lines just above `key = ...` in `[section]` of the example file."""
    current = ""
    for i, line in enumerate(lines):
        if line.startswith("["):
            current = line.strip("[] \n")
        elif current == section and line.startswith(f"{key} ="):
            j = i
            while j > 0 and lines[j - 1].startswith("#"):
                j -= 1
            return " ".join(ln.lstrip("# ").strip() for ln in lines[j:i])
    raise AssertionError(f"{section}.{key} not in the example")


def test_example_comments_give_unit_and_allowed_choices() -> None:
    """Each key's comment states its unit as in the table, and every choice of an enum."""
    lines = EXAMPLE.read_text(encoding="utf-8").splitlines()
    for s in SETTINGS:
        comment = comment_above(lines, s.section, s.key)
        assert f"Unit: {s.unit or 'none'}" in comment, s.name
        assert "Allowed:" in comment, s.name
        if s.choices is not None:
            assert all(f'"{c.value}"' in comment for c in s.choices), s.name
    assert "TAPRIG_DATA_DIR" in comment_above(lines, "store", "data_dir")
    text = EXAMPLE.read_text(encoding="utf-8")
    head = text[: text.index("\n[[channels]]\n")]
    assert all(f"#   {s.key}" in head for s in CHANNEL_SETTINGS)


# --- unit conversions


def test_unit_conversions_into_si_per_volt(tmp_path: Path) -> None:
    """si_per_volt from the three sensitivity units.

    mV/N → N/V: 1000 / S, from the SI prefix milli = 10⁻³ (BIPM, The International System of
    Units, 9th ed., 2019, table 7). mV/(m/s²) likewise. mV/g → (m/s²)/V: 1000 · g_n / S with
    g_n = 9.80665 m/s² exactly (3rd CGPM 1901; ISO 80000-3:2019). A 10 mV/g accelerometer is
    therefore 980.665 (m/s²)/V.
    """
    config = load_text(tmp_path, CHANNELS_3)
    hammer, acc1, acc2 = config.channels
    assert hammer.si_per_volt == pytest.approx(1000.0 / 2.25, rel=1e-15)
    assert acc1.si_per_volt == pytest.approx(980.665, rel=1e-15)
    assert acc1.si_per_volt == pytest.approx(1000.0 * G_N / 10.0, rel=1e-15)
    assert acc2.si_per_volt == pytest.approx(1000.0 / 1.02, rel=1e-15)
    # the sensitivity is kept as entered, with its unit
    assert (acc1.sensitivity, acc1.sensitivity_unit) == (10.0, "mV/g")
    assert (hammer.sensitivity, hammer.sensitivity_unit) == (2.25, "mV/N")


def test_mv_per_g_agrees_with_mv_per_ms2_through_standard_gravity(tmp_path: Path) -> None:
    """S mV/g and S/g_n mV/(m/s²) describe the same sensor (g_n exact, CGPM 1901)."""
    text = CHANNELS_3.replace("sensitivity = 1.02", f"sensitivity = {10.0 / G_N!r}")
    acc1, acc2 = load_text(tmp_path, text).response_channels
    assert acc1.si_per_volt == pytest.approx(acc2.si_per_volt, rel=1e-14)


@pytest.mark.parametrize("spelling", ["mV/(m/s^2)", "mV/(m/s²)", "mV/ms2"])
def test_accelerance_unit_spellings_are_one_unit(tmp_path: Path, spelling: str) -> None:
    """All three spellings mean mV per m/s²: 1000 / S (m/s²)/V (SI prefix milli, BIPM 2019)."""
    text = CHANNELS_3.replace('unit = "mV/(m/s^2)"', f'unit = "{spelling}"')
    acc2 = load_text(tmp_path, text).response_channels[1]
    assert acc2.sensitivity_unit == "mV/(m/s^2)"
    assert acc2.si_per_volt == pytest.approx(1000.0 / 1.02, rel=1e-15)


def test_channels_sorted_by_index_and_found_by_role(tmp_path: Path) -> None:
    text = """
[[channels]]
index = 3
role = "response"
label = "far"
sensitivity = 1.0
unit = "mV/g"

[[channels]]
index = 1
role = "response"
label = "near"
sensitivity = 1.0
unit = "mV/g"

[[channels]]
index = 2
role = "force"
label = "hammer"
sensitivity = 1.0
unit = "mV/N"
"""
    config = load_text(tmp_path, text)
    assert [c.index for c in config.channels] == [1, 2, 3]
    assert config.force_channel.label == "hammer"
    assert [c.label for c in config.response_channels] == ["near", "far"]
    assert config.channels_of(Role.FORCE) == (config.force_channel,)
    assert all(isinstance(c, ChannelSpec) for c in config.channels)


# --- values of every kind


def test_file_values_of_every_kind_are_read(tmp_path: Path) -> None:
    text = """
[rig]
name = "bay-2"
[device]
url = "simulated:text"
format = "text"
text_rate_hz = 25600
[capture]
block = 4096
trigger_slope = "falling"
accept = "operator"
[windows]
exponential_end = "none"
[store]
data_dir = "points"
min_free_mb = 0
"""
    config = load_text(tmp_path, text)
    assert config.rig.name == "bay-2"
    assert config.device.format is StreamFormat.TEXT
    assert config.device.text_rate_hz == 25600.0
    assert isinstance(config.device.text_rate_hz, float)
    assert config.capture.block == 4096
    assert config.capture.trigger_slope is TriggerSlope.FALLING
    assert config.capture.accept is AcceptMode.OPERATOR
    assert config.windows.exponential_end is None
    assert config.store.data_dir == tmp_path / "points"  # relative to the file's folder
    assert config.store.min_free_mb == 0
    assert config.source == tmp_path / "taprigd.toml"


def test_exponential_end_zero_means_no_window(tmp_path: Path) -> None:
    assert load_text(tmp_path, "[windows]\nexponential_end = 0\n").windows.exponential_end is None
    assert load_config(None, ["windows.exponential_end=0.05"], {}).windows.exponential_end == 0.05


def test_bool_kind_reads_toml_and_text() -> None:
    flag = Setting("x", "flag", Kind.BOOL, False, "", "a test flag", allowed="true or false")
    assert flag.parse(True) is True
    assert flag.parse("yes", from_text=True) is True
    assert flag.parse("off", from_text=True) is False
    with pytest.raises(ConfigError, match=r'x\.flag = "yes" \(a string\): must be true or false'):
        flag.parse("yes")
    with pytest.raises(ConfigError, match=r"x\.flag = maybe: must be true or false"):
        flag.parse("maybe", from_text=True)


# --- errors


def test_block_not_a_power_of_two_message(tmp_path: Path) -> None:
    message = error_of(tmp_path, "[capture]\nblock = 10000\n")
    assert message.startswith("capture.block = 10000: must be a power of two from 256 to 65536")
    assert str(tmp_path / "taprigd.toml") in message


@pytest.mark.parametrize(
    ("text", "wanted"),
    [
        # unknown key, with a suggestion
        ("[capture]\nblok = 8192\n", ["capture.blok", "8192", "did you mean capture.block?"]),
        # unknown key that belongs to another section
        ("[device]\nblock = 8192\n", ["device.block", "did you mean capture.block?"]),
        # nothing close: the section's keys are listed
        ("[store]\nzzzz = 1\n", ["store.zzzz", "data_dir, min_free_mb"]),
        # unknown section
        ("[captur]\nblock = 8192\n", ["[captur]", "unknown section", "did you mean [capture]?"]),
        ("[chanels]\nindex = 0\n", ["[chanels]", "did you mean [[channels]]?"]),
        # a setting outside any section
        ("block = 8192\n", ["block = 8192", "did you mean capture.block?"]),
        # a section given as a value
        ("capture = 5\n", ["capture = 5", "must be a table"]),
        # wrong types
        (
            '[capture]\nblock = "8192"\n',
            ["capture.block", '"8192"', "a string", "power of two from 256 to 65536"],
        ),
        ("[capture]\nblock = 8192.0\n", ["capture.block", "8192.0", "a number", "power of two"]),
        ("[capture]\naverages = true\n", ["capture.averages", "true", "a boolean", "1 to 100"]),
        ('[device]\nstall_s = "2"\n', ["device.stall_s", '"2"', "a string", "a number > 0"]),
        ("[rig]\nname = 7\n", ["rig.name", "7", "an integer", "DNS label"]),
        ("[store]\ndata_dir = [1]\n", ["store.data_dir", "[1]", "an array", "non-empty path"]),
        # out of range
        ("[capture]\naverages = 0\n", ["capture.averages = 0", "an integer from 1 to 100"]),
        ("[capture]\naverages = 101\n", ["capture.averages = 101", "from 1 to 100"]),
        ("[capture]\nblock = 128\n", ["capture.block = 128", "from 256 to 65536"]),
        ("[capture]\nblock = 131072\n", ["capture.block = 131072", "from 256 to 65536"]),
        ("[device]\nstall_s = 0\n", ["device.stall_s = 0", "a number > 0"]),
        ("[device]\nstall_s = inf\n", ["device.stall_s = inf", "a number > 0"]),
        ("[device]\ntext_rate_hz = -1\n", ["device.text_rate_hz = -1", "0 (take the rate"]),
        ("[capture]\ntrigger_level_n = 0.0\n", ["capture.trigger_level_n = 0.0", "> 0"]),
        ("[capture]\ndouble_hit_fraction = 1\n", ["capture.double_hit_fraction = 1", "0 and 1"]),
        ("[capture]\nfull_scale_margin = 0.6\n", ["full_scale_margin = 0.6", "from 0 to 0.5"]),
        ("[store]\nmin_free_mb = -5\n", ["store.min_free_mb = -5", "an integer ≥ 0"]),
        ("[windows]\nexponential_end = 1.5\n", ["exponential_end = 1.5", 'or "none"']),
        ('[windows]\nexponential_end = "off"\n', ['exponential_end = "off"', 'or "none"']),
        ('[rig]\nname = "-bad"\n', ['rig.name = "-bad"', "letters, digits or hyphens"]),
        ('[rig]\nname = ""\n', ['rig.name = ""', "1 to 63"]),
        ('[device]\nurl = "simulated:usb"\n', ['device.url = "simulated:usb"', '"simulated:tcp"']),
        ('[device]\nurl = ""\n', ['device.url = ""', "pyserial URL"]),
        # enum choices
        ('[capture]\ntrigger_slope = "up"\n', ['trigger_slope = "up"', '"rising", "falling"']),
        ('[device]\nformat = "csv"\n', ['device.format = "csv"', 'one of "binary", "text"']),
        ('[capture]\naccept = "Auto"\n', ['capture.accept = "Auto"', '"auto", "operator"']),
        # settings that depend on each other
        (
            "[capture]\nblock = 1024\npretrigger = 512\n",
            ["capture.pretrigger = 512", "from 0 to 511", "capture.block = 1024"],
        ),
        (
            "[capture]\nhysteresis_n = 5.0\n",
            ["capture.hysteresis_n = 5.0", "below capture.trigger_level_n = 2.0"],
        ),
        ("[capture]\nhysteresis_n = -1\n", ["capture.hysteresis_n = -1", "≥ 0"]),
        (
            '[device]\nurl = "simulated:text"\n',
            ['device.format = "binary"', 'must be "text"', '"simulated:text"'],
        ),
    ],
)
def test_errors_name_key_value_and_what_is_allowed(
    tmp_path: Path, text: str, wanted: list[str]
) -> None:
    message = error_of(tmp_path, text)
    for part in wanted:
        assert part in message, (part, message)


def channels_text(*tables: dict[str, object]) -> str:
    out = []
    for table in tables:
        out.append("[[channels]]")
        for key, value in table.items():
            out.append(f"{key} = {value!r}".replace("'", '"'))
    return "\n".join(out) + "\n"


HAMMER = {"index": 0, "role": "force", "label": "hammer", "sensitivity": 2.25, "unit": "mV/N"}
ACC = {"index": 1, "role": "response", "label": "acc1", "sensitivity": 10.0, "unit": "mV/g"}


@pytest.mark.parametrize(
    ("tables", "wanted"),
    [
        (
            [HAMMER, ACC, {**HAMMER, "index": 2, "label": "hammer2"}],
            ['channels[2].role = "force"', 'exactly one channel must have role "force"'],
        ),
        ([ACC], ['no channel has role "force"', "exactly one"]),
        ([HAMMER], ['no channel has role "response"', "at least one"]),
        (
            [HAMMER, {**ACC, "index": 0}],
            ["channels[1].index = 0", "must be unique", "channels[0]"],
        ),
        (
            [HAMMER, ACC, {**ACC, "index": 2, "label": "ACC1"}],
            ['channels[2].label = "ACC1"', "must be unique", '"acc1"'],
        ),
        (
            [{**HAMMER, "unit": "mV/g"}, ACC],
            ['channels[0].unit = "mV/g"', 'must be "mV/N" for a force channel'],
        ),
        (
            [HAMMER, {**ACC, "unit": "mV/N"}],
            ['channels[1].unit = "mV/N"', '"mV/(m/s^2)"', '"mV/g" for a response channel'],
        ),
        ([HAMMER, {**ACC, "unit": "V/g"}], ['channels[1].unit = "V/g"', '"mV/ms2"']),
        ([HAMMER, {**ACC, "role": "accel"}], ['channels[1].role = "accel"', '"response"']),
        ([HAMMER, {**ACC, "label": "acc 1"}], ['channels[1].label = "acc 1"', "1 to 32"]),
        ([HAMMER, {**ACC, "label": "a" * 33}], ["channels[1].label", "1 to 32"]),
        ([HAMMER, {**ACC, "sensitivity": 0.0}], ["channels[1].sensitivity = 0.0", "> 0"]),
        ([HAMMER, {**ACC, "index": 16}], ["channels[1].index = 16", "from 0 to 15"]),
        ([HAMMER, {**ACC, "index": -1}], ["channels[1].index = -1", "from 0 to 15"]),
        (
            [HAMMER, {**ACC, "sensitivty": 1.0}],
            ["channels[1].sensitivty = 1.0", "did you mean channels[1].sensitivity?"],
        ),
        (
            [HAMMER, {k: v for k, v in ACC.items() if k != "unit"}],
            ["channels[1].unit: missing", '"mV/g"'],
        ),
    ],
)
def test_channel_errors_name_key_value_and_what_is_allowed(
    tmp_path: Path, tables: list[dict[str, object]], wanted: list[str]
) -> None:
    message = error_of(tmp_path, channels_text(*tables))
    for part in wanted:
        assert part in message, (part, message)


def test_channels_written_as_a_single_table(tmp_path: Path) -> None:
    message = error_of(tmp_path, '[channels]\nindex = 0\nrole = "force"\n')
    assert "channels = " in message
    assert "[[channels]]" in message


def test_real_device_needs_channels(tmp_path: Path) -> None:
    message = error_of(tmp_path, '[device]\nurl = "/dev/ttyACM0"\n')
    assert 'device.url = "/dev/ttyACM0"' in message
    assert "channels must be configured" in message
    config = load_text(tmp_path, '[device]\nurl = "/dev/ttyACM0"\n' + CHANNELS_3)
    assert not config.device.is_simulated
    assert len(config.channels) == 3


def test_toml_syntax_error_names_file_line_and_column(tmp_path: Path) -> None:
    message = error_of(tmp_path, "[capture]\nblock = 8192\naverages = = 3\n")
    assert str(tmp_path / "taprigd.toml") in message
    assert "not valid TOML" in message
    assert "line 3" in message
    assert "column" in message


def test_unreadable_files(tmp_path: Path) -> None:
    missing = tmp_path / "nowhere.toml"
    with pytest.raises(ConfigError, match=r"nowhere\.toml: cannot be read"):
        load_config(missing, environ={})
    latin = tmp_path / "latin.toml"
    latin.write_bytes(b'[rig]\nname = "caf\xe9"\n')
    with pytest.raises(ConfigError, match=r"latin\.toml: not valid TOML"):
        load_config(latin, environ={})


# --- overrides and the environment


def test_override_wins_over_the_file(tmp_path: Path) -> None:
    text = "[capture]\nblock = 4096\naverages = 3\n"
    config = load_text(tmp_path, text, "capture.block=8192")
    assert config.capture.block == 8192
    assert config.capture.averages == 3  # untouched by the override
    assert load_text(tmp_path, text, "capture.block=8192", "capture.block=1024").capture.block == (
        1024
    )


def test_overrides_of_every_kind(tmp_path: Path) -> None:
    config = load_config(
        write(tmp_path, CHANNELS_3),
        [
            "rig.name=bench-3",
            "device.baudrate = 115200",
            "capture.trigger_level_n=12.5",
            "capture.trigger_slope=falling",
            "windows.exponential_end=none",
            "device.url=socket://192.168.4.1:5000",
        ],
        {},
    )
    assert config.rig.name == "bench-3"
    assert config.device.baudrate == 115200
    assert config.capture.trigger_level_n == 12.5
    assert config.capture.trigger_slope is TriggerSlope.FALLING
    assert config.windows.exponential_end is None
    assert config.device.url == "socket://192.168.4.1:5000"  # the first "=" splits


def test_override_replaces_a_bad_file_value(tmp_path: Path) -> None:
    assert load_text(tmp_path, "[capture]\nblock = 10000\n", "capture.block=2048").capture.block
    with pytest.raises(ConfigError, match="command-line override"):
        load_text(tmp_path, "[capture]\nblock = 2048\n", "capture.block=10000")


@pytest.mark.parametrize(
    ("override", "wanted"),
    [
        ("capture.block=abc", ["capture.block = abc", "power of two from 256 to 65536"]),
        ("capture.block=8192.0", ["capture.block = 8192.0", "power of two"]),
        ("capture.block=10000", ["capture.block = 10000", "command-line override"]),
        ("capture.trigger_level_n=nan", ["capture.trigger_level_n = nan", "a number > 0"]),
        ("capture.accept=later", ["capture.accept = later", '"auto", "operator"']),
        ("capture.pretrigger=9000", ["capture.pretrigger = 9000", "from 0 to 8191"]),
        ("capture.blok=8192", ["capture.blok = 8192", "unknown setting", "capture.block?"]),
        ("block=8192", ["block = 8192", "did you mean capture.block?"]),
        ("capture.block", ["'capture.block'", "section.key=value"]),
        ("=3", ["'=3'", "section.key=value"]),
        ("channels[0].sensitivity=2", ["channels[0].sensitivity", "[[channels]] tables"]),
    ],
)
def test_bad_overrides_name_the_key(override: str, wanted: list[str]) -> None:
    with pytest.raises(ConfigError) as info:
        load_config(None, [override], {})
    for part in wanted:
        assert part in str(info.value), (part, str(info.value))


def test_data_dir_precedence_file_env_override(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """File < TAPRIG_DATA_DIR < override; relative paths from the file's folder, or else from
    the current folder."""
    conf_dir = tmp_path / "etc"
    conf_dir.mkdir()
    path = write(conf_dir, '[store]\ndata_dir = "data"\n')
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    assert load_config(path, environ={}).store.data_dir == conf_dir / "data"
    env = {"TAPRIG_DATA_DIR": "from-env"}
    assert load_config(path, environ=env).store.data_dir == work / "from-env"
    assert load_config(path, environ={"TAPRIG_DATA_DIR": ""}).store.data_dir == conf_dir / "data"
    got = load_config(path, ["store.data_dir=/srv/taprig"], env).store.data_dir
    assert got == Path("/srv/taprig")
    assert load_config(None, ["store.data_dir=rel"], {}).store.data_dir == work / "rel"


def test_environment_defaults_to_os_environ(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    monkeypatch.setenv("TAPRIG_DATA_DIR", str(tmp_path / "d"))
    assert load_config(None).store.data_dir == tmp_path / "d"


# --- checks that need the sample rate


def test_ring_buffer_must_hold_two_records() -> None:
    """ring_seconds ≥ 2 · block / rate (arithmetic): 2 × 16384 / 51 200 Hz = 0.64 s,
    2 × 16384 / 8192 Hz = 4 s, 2 × 16384 / 8000 Hz = 4.096 s."""
    short = load_config(None, ["capture.ring_seconds=0.5"], {})
    with pytest.raises(ConfigError, match=r"capture\.ring_seconds = 0\.5: .* = 0\.64 s"):
        short.check_rate(51_200.0)
    load_config(None, ["capture.ring_seconds=0.64"], {}).check_rate(51_200.0)
    default = load_config(None, environ={})
    default.check_rate(8192.0)
    with pytest.raises(ConfigError, match=r"= 4\.096 s"):
        default.check_rate(8000.0)


@pytest.mark.parametrize(("old", "new"), [("virtual", "simulated"),
                                          ("virtual:text", "simulated:text"),
                                          ("virtual:tcp", "simulated:tcp")])  # fmt: skip
def test_earlier_names_of_the_simulated_piece_still_load_with_a_warning(
    tmp_path: Path, caplog: pytest.LogCaptureFixture, old: str, new: str
) -> None:
    """device.url's values of the previous release keep working for one release, and say so."""
    path = tmp_path / "taprigd.toml"
    fmt = '\nformat = "text"' if new.endswith(":text") else ""
    path.write_text(f'[device]\nurl = "{old}"{fmt}\n')
    text = ["device.format=text"] if fmt else []
    with caplog.at_level("WARNING"):
        from_file = load_config(path, environ={})
        from_override = load_config(None, [f"device.url={old}", *text], environ={})
    assert from_file.device.url == from_override.device.url == new
    today = load_config(None, [f"device.url={new}", *text], environ={})
    assert from_file.device.is_simulated and from_file.channels == today.channels
    said = [r.getMessage() for r in caplog.records if r.levelname == "WARNING"]
    assert len(said) == 2 and all(f'"{old}" is the old name of "{new}"' in m for m in said)
    assert str(path) in said[0] and "command-line override" in said[1]
