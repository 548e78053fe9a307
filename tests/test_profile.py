"""Profile loading and validation: every error names the file and the key."""

import pytest

from tankside.drivers.errors import ProfileError
from tankside.drivers.profile import PROFILE_DIR, builtin_profiles, load_profile, parse_profile

TEMPLATE = (PROFILE_DIR / "generic-scpi-digitiser.toml").read_text()


def edited(old: str, new: str) -> str:
    assert old in TEMPLATE
    return TEMPLATE.replace(old, new, 1)


def test_builtin_by_name_and_path():
    assert "generic-scpi-digitiser" in builtin_profiles()
    by_name = load_profile("generic-scpi-digitiser")
    by_path = load_profile(PROFILE_DIR / "generic-scpi-digitiser.toml")
    assert by_name == by_path
    assert by_name.kind == "digitiser" and by_name.ranges_v[0] == 0.02
    assert by_name.command("set_range", channel=2, range_v=0.5) == "CHAN2:RANG 0.5"


def test_simulator_profiles_load():
    from tankside.simulators.bench import DIGITISER_PROFILE_PATH, GENERATOR_PROFILE_PATH

    assert load_profile(DIGITISER_PROFILE_PATH).kind == "digitiser"
    assert load_profile(GENERATOR_PROFILE_PATH).values["output_on"] == "ON"


def test_unknown_name():
    with pytest.raises(ProfileError, match="no-such-scope.*built-in"):
        load_profile("no-such-scope")


@pytest.mark.parametrize("old, new, where", [
    ('\nkind = "digitiser"', '\nkind = "scope"', "[instrument] kind"),
    ('set_range = "CHAN{channel}:RANG {range_v}"', 'set_range = "RANG {volts}"',
     "[commands] set_range"),
    ('arm_single = "INIT"', 'arm_singel = "INIT"', "[commands] arm_singel"),
    ('arm_single = "INIT"', "", "[commands] arm_single"),
    ('format = "int16"', 'format = "int12"', "[data] format"),
    ('byte_order = "little"', 'byte_order = "middle"', "[data] byte_order"),
    ("code_max = 32767", "code_max = 40000", "[data] code_min"),
    ("code_max = 32767", "code_max = -40000", "[data] code_max"),
    ("values_v = [0.02, 0.05,", "values_v = [0.05, 0.02,", "[ranges] values_v"),
    ("values_v = [0.02,", 'values_v = ["x",', "[ranges] values_v"),
    ("timeout_s = 5.0", "timeout_s = -1", "[transport] timeout_s"),
    ("timeout_s = 5.0", "baud = 9600", "[transport] baud"),
    ('get_offset = "WAV:YOFF?"', 'get_offset = "WAV:YOFF? {"', "[commands] get_offset"),
    ('identify = "*IDN?"', "identify = 5", "[commands] identify"),
    ("\n[ranges]\n", "\n[extras]\nx = 1\n[ranges]\n", "[top level] extras"),
])
def test_errors_name_file_and_key(old, new, where):
    with pytest.raises(ProfileError) as info:
        parse_profile(edited(old, new), source="my-scope.toml")
    assert str(info.value).startswith(f"my-scope.toml: {where}:"), str(info.value)


def test_needs_a_wait():
    text = edited('acquisition_done = "ACQ:DONE?"', "").replace('wait_complete = "*OPC?"', "")
    with pytest.raises(ProfileError, match="acquisition_done"):
        parse_profile(text, source="p.toml")


def test_not_toml(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[instrument\nkind=")
    with pytest.raises(ProfileError, match="broken.toml: not valid TOML"):
        load_profile(path)


def test_generator_defaults_and_checks():
    base = """[instrument]\nkind = "generator"\n[commands]\nidentify = "*IDN?"
set_output = "OUTP {state}"\nget_output = "OUTP?"\nset_amplitude = "VOLT {amplitude_vpp}"
get_amplitude = "VOLT?"\nset_frequency = "FREQ {frequency_hz}"
set_burst_cycles = "BURS:NCYC {cycles}"\nset_burst_period = "BURS:PER {period_s}"\n"""
    profile = parse_profile(base, source="g.toml")
    assert profile.values["output_on_replies"] == ("1", "ON")
    with pytest.raises(ProfileError, match=r"g.toml: \[commands\] set_output"):
        parse_profile(base.replace("OUTP {state}", "OUTP {range_v}"), source="g.toml")
    with pytest.raises(ProfileError, match=r"\[top level\] data"):
        parse_profile(base + '[data]\nformat = "int8"\n', source="g.toml")
    with pytest.raises(ProfileError, match="both on and off"):
        parse_profile(base + '[values]\noutput_off_replies = ["1"]\n', source="g.toml")


def test_missing_command_at_use():
    profile = parse_profile(edited('reset = "*RST"\n', ""), source="p.toml")
    with pytest.raises(ProfileError, match=r"p.toml: \[commands\] reset"):
        profile.command("reset")


@pytest.mark.parametrize("old, new, where, words", [
    ('set_coupling = "CHAN{channel}:COUP {coupling}"',
     'set_coupling = "CHAN{channel}:COUP {coupling};:CHAN{channel}:RANG 5"',
     "[commands] set_coupling", "contains ';'"),
    ('arm_single = "INIT"', 'arm_single = "INIT\\n*RST"', "[commands] arm_single",
     "line break"),
    ('arm_single = "INIT"', 'arm_single = "INIT\\r"', "[commands] arm_single", "line break"),
    ('arm_single = "INIT"', 'arm_single = "INIT\u00b5"', "[commands] arm_single",
     "only printable ASCII"),
    ('arm_single = "INIT"', "arm_single = [\"INIT\"]", "[commands] arm_single",
     "non-empty string"),
])
def test_templates_are_one_command_of_printable_ascii(old, new, where, words):
    with pytest.raises(ProfileError) as info:
        parse_profile(edited(old, new), source="my-scope.toml")
    assert str(info.value).startswith(f"my-scope.toml: {where}:"), str(info.value)
    assert words in str(info.value)


def test_generator_output_words_are_command_text():
    from tankside.simulators.bench import GENERATOR_PROFILE_PATH

    text = GENERATOR_PROFILE_PATH.read_text()
    assert 'output_on = "ON"' in text
    for bad, words in (('"ON;*RST"', "contains ';'"), ('"ON\\n"', "line break"),
                       ("1", "non-empty string")):
        with pytest.raises(ProfileError) as info:
            parse_profile(text.replace('output_on = "ON"', f"output_on = {bad}"),
                          source="gen.toml")
        assert str(info.value).startswith("gen.toml: [values] output_on:")
        assert words in str(info.value)


@pytest.mark.parametrize("value, words", [
    ("DC;:CHAN1:RANG 5", "contains ';'"),
    ("POS;*RST", "contains ';'"),
    ("DC\n", "line break"),
    ("DC\r\n", "line break"),
    ("D\u00c7", "only printable ASCII"),
])
def test_values_filled_at_run_time_are_checked(value, words):
    from tankside.drivers.errors import SettingError

    profile = load_profile("generic-scpi-digitiser")
    with pytest.raises(SettingError) as info:
        profile.command("set_coupling", channel=1, coupling=value)
    message = str(info.value)
    assert "generic-scpi-digitiser.toml: [commands] set_coupling: {coupling}" in message
    assert words in message and "nothing was sent" in message
    assert profile.command("set_coupling", channel=1, coupling="DC") == "CHAN1:COUP DC"


def test_setup_lines_are_kept_in_order():
    profile = parse_profile(edited('[commands]\n', '[commands]\nsetup = ["WAV:FORM INT16", '
                                   '"WAV:BORD LSBF"]\n'), source="my-scope.toml")
    assert profile.setup == ("WAV:FORM INT16", "WAV:BORD LSBF")
    assert "setup" not in profile.commands
    assert load_profile("generic-scpi-digitiser").setup == ()


@pytest.mark.parametrize("lines, where, words", [
    ('["WAV:FORM INT16", "WAV:BORD LSBF;*RST"]', "[commands] setup line 2", "contains ';'"),
    ('["WAV:FORM INT16\\n*RST"]', "[commands] setup line 1", "line break"),
    ('["WAV:FORM INT16\\r"]', "[commands] setup line 1", "line break"),
    ('["WAV:FORM \u00b5"]', "[commands] setup line 1", "only printable ASCII"),
    ('["  "]', "[commands] setup line 1", "non-empty string"),
    ('[1]', "[commands] setup line 1", "non-empty string"),
    ('"WAV:FORM INT16"', "[commands] setup", "expected a list"),
])
def test_setup_lines_are_each_one_command_of_printable_ascii(lines, where, words):
    with pytest.raises(ProfileError) as info:
        parse_profile(edited('[commands]\n', f'[commands]\nsetup = {lines}\n'),
                      source="my-scope.toml")
    assert str(info.value).startswith(f"my-scope.toml: {where}:"), str(info.value)
    assert words in str(info.value)


def test_range_kinds():
    assert load_profile("generic-scpi-digitiser").range_kind == "span"
    peak = parse_profile(edited('kind = "span"\n', 'kind = "peak"\n'))
    assert (peak.instrument_range(0.5), peak.span_of(0.25)) == (0.25, 0.5)
    div = parse_profile(edited('kind = "span"\n', 'kind = "per_division"\ndivisions = 8\n'))
    assert (div.instrument_range(0.8), div.span_of(0.1)) == (0.1, 0.8)


@pytest.mark.parametrize("lines, where, words", [
    ('kind = "volts"\n', "[ranges] kind", "expected one of span, peak, per_division"),
    ('kind = "per_division"\n', "[ranges] divisions", "whole number of divisions"),
    ('kind = "per_division"\ndivisions = 0\n', "[ranges] divisions", "whole number"),
    ('kind = "per_division"\ndivisions = 8.5\n', "[ranges] divisions", "whole number"),
    ('kind = "peak"\ndivisions = 8\n', "[ranges] divisions", "only used with"),
])
def test_range_kind_errors(lines, where, words):
    with pytest.raises(ProfileError) as info:
        parse_profile(edited('kind = "span"\n', lines), source="my-scope.toml")
    assert str(info.value).startswith(f"my-scope.toml: {where}:"), str(info.value)
    assert words in str(info.value)
