"""The bench file: validation with messages naming file and key, paths, overrides."""

from __future__ import annotations

from pathlib import Path

import pytest

from tankside.monitor.errors import CalibrationError, ConfigError
from tankside.monitor.live.benchfile import load_bench, merge_overrides

CAL_TEXT = Path(__file__).resolve().parents[1] / "simulators" / "data" / "demo-hydrophone.csv"

GOOD = """
[digitiser]
resource = "TCPIP0::127.0.0.1::5025::SOCKET"
profile = "dig.toml"
record_length = 2000
sample_rate_hz = 250e6
range_v = 0.5
trigger_timeout_s = 1.5

[generator]
resource = "TCPIP0::127.0.0.1::5026::SOCKET"
profile = "gen.toml"
amplitude_vpp = 2.0

[calibration]
file = "cal/hydrophone.csv"

[loading]
hydrophone_capacitance_f = 100e-12

[conversion]
method = "narrowband"

[water]
temperature_c = 22.5

[alerts.over_pressure]
limit_pa = 2.0e6

[session]
folder = "runs"
queue_capacity = 8
"""


def write(tmp_path, text, name="bench.toml"):
    (tmp_path / "dig.toml").write_text("# placeholder\n")
    (tmp_path / "gen.toml").write_text("# placeholder\n")
    (tmp_path / "cal").mkdir(exist_ok=True)
    (tmp_path / "cal" / "hydrophone.csv").write_text(CAL_TEXT.read_text())
    path = tmp_path / name
    path.write_text(text)
    return path


class TestLoadBench:
    def test_good_file_and_relative_paths(self, tmp_path):
        bench = load_bench(write(tmp_path, GOOD))
        assert bench.digitiser.resource == "TCPIP0::127.0.0.1::5025::SOCKET"
        assert bench.digitiser.profile == str(tmp_path / "dig.toml")
        assert bench.generator.profile == str(tmp_path / "gen.toml")
        assert bench.generator.amplitude_vpp == 2.0
        assert bench.calibration_path == tmp_path / "cal" / "hydrophone.csv"
        assert bench.session_folder == tmp_path / "runs"
        assert bench.trigger_timeout_s == 1.5
        assert bench.queue_capacity == 8
        assert bench.temperature_c == 22.5
        settings = bench.digitiser_settings()
        assert (settings.record_length, settings.range_v) == (2000, 0.5)
        assert bench.loading().hydrophone_capacitance_f == 100e-12
        assert bench.conversion_settings().method == "narrowband"
        assert bench.alert_config().rules["over_pressure"].params["limit_pa"] == 2.0e6
        assert bench.calibration().sha256
        # The recorded configuration carries resolved paths, so it stands on its own.
        assert bench.tables["calibration"]["file"] == str(tmp_path / "cal" / "hydrophone.csv")

    def test_builtin_profile_name_is_kept(self, tmp_path):
        text = GOOD.replace('profile = "dig.toml"', 'profile = "generic-scpi-digitiser"')
        bench = load_bench(write(tmp_path, text))
        assert bench.digitiser.profile == "generic-scpi-digitiser"

    def test_generator_optional(self, tmp_path):
        text = GOOD.split("[generator]")[0] + "[calibration]" + GOOD.split("[calibration]")[1]
        assert load_bench(write(tmp_path, text)).generator is None

    @pytest.mark.parametrize("text, words", [
        (GOOD.replace('resource = "TCPIP0::127.0.0.1::5025::SOCKET"\n', "", 1),
         "[digitiser] resource: missing"),
        (GOOD.replace("range_v = 0.5", 'range_v = "big"'), "[digitiser]"),
        (GOOD.replace("record_length = 2000", "record_lenght = 2000"),
         "[digitiser] record_lenght: unknown key"),
        (GOOD.replace("temperature_c = 22.5", "temperature_c = 95.0"),
         "[water] temperature_c"),
        (GOOD.replace("queue_capacity = 8", "queue_capacity = 0"),
         "[session] queue_capacity"),
        (GOOD.replace('method = "narrowband"', 'methd = "narrowband"'),
         "[conversion] methd: unknown key"),
        (GOOD.replace("limit_pa = 2.0e6", "limit_pascal = 2.0e6"), "limit_pascal"),
        (GOOD.replace("[session]", "[sesion]"), "unknown section [sesion]"),
        (GOOD.replace('file = "cal/hydrophone.csv"', ""), "[calibration] file: missing"),
        (GOOD.replace("trigger_timeout_s = 1.5", "trigger_timeout_s = -1"),
         "trigger_timeout_s"),
        (GOOD.replace("amplitude_vpp = 2.0", "burst_cycles = 3"),
         "burst_cycles and burst_period_s"),
        ("[digitiser\nresource = 1", "not valid TOML"),
    ])
    def test_bad_values_name_file_and_key(self, tmp_path, text, words):
        path = write(tmp_path, text)
        with pytest.raises(ConfigError) as info:
            bench = load_bench(path)
            # Some problems only show when the object is built.
            bench.digitiser_settings()
            bench.conversion_settings()
            bench.alert_config()
        assert str(path) in str(info.value)
        assert words in str(info.value)

    def test_missing_files(self, tmp_path):
        with pytest.raises(ConfigError, match="no such bench file"):
            load_bench(tmp_path / "absent.toml")
        bench = load_bench(write(tmp_path, GOOD.replace("cal/hydrophone.csv", "cal/none.csv")))
        with pytest.raises(ConfigError, match=r"\[calibration\] file: no such file"):
            bench.calibration()


class TestOverrides:
    def test_merge_sets_nested_and_removes(self):
        data = {"digitiser": {"resource": "A"}, "generator": {"resource": "G"}}
        merged = merge_overrides(data, {"digitiser.resource": "B", "generator": None,
                                        "alerts.no_trigger.after_s": 3.0})
        assert merged == {"digitiser": {"resource": "B"},
                          "alerts": {"no_trigger": {"after_s": 3.0}}}
        assert data["digitiser"]["resource"] == "A"   # the input is left alone

    def test_overrides_apply_before_validation(self, tmp_path):
        path = write(tmp_path, GOOD)
        bench = load_bench(path, {"digitiser.resource": "TCPIP0::10.0.0.9::5025::SOCKET",
                                  "digitiser.range_v": 1.0, "generator": None,
                                  "conversion.method": "deconvolve"})
        assert bench.digitiser.resource == "TCPIP0::10.0.0.9::5025::SOCKET"
        assert bench.digitiser_settings().range_v == 1.0
        assert bench.generator is None
        assert bench.conversion_settings().method == "deconvolve"
        with pytest.raises(ConfigError, match="temperature_c"):
            load_bench(path, {"water.temperature_c": "warm"})


def test_commented_examples_in_the_simulated_bench_file_are_valid(tmp_path):
    # The bench file `tankside simulate` writes is where users start; its commented-out
    # [loading] and [alerts] examples must load once uncommented.
    from tankside.simulators.bench import SimulatedBench

    with SimulatedBench() as sim:
        text = sim.bench_file_text(session_folder=str(tmp_path))
    lines = []
    for line in text.splitlines():
        body = line[2:] if line.startswith("# ") else None
        if body and (body.startswith("[") or "=" in body):
            line = body
        lines.append(line)
    path = tmp_path / "bench.toml"
    path.write_text("\n".join(lines) + "\n")
    bench = load_bench(path)
    assert bench.loading().hydrophone_capacitance_f == 100e-12
    assert bench.alert_config().rules["over_pressure"].params["rated_max_pa"] == 5.0e6
    assert "safe-off" in bench.alert_config().rules["over_pressure"].actions


class TestCalibrationChecks:
    @staticmethod
    def _typo(tmp_path):
        lines = CAL_TEXT.read_text().splitlines()
        i = next(k for k, ln in enumerate(lines) if ln.startswith("3500000,"))
        fields = lines[i].split(",")
        lines[i] = ",".join([fields[0], "-53.9165", fields[2]])   # for -253.9165
        (tmp_path / "cal" / "hydrophone.csv").write_text("\n".join(lines) + "\n")
        return i + 1

    def test_default_refuses_a_mistyped_row(self, tmp_path):
        bench = load_bench(write(tmp_path, GOOD))
        line = self._typo(tmp_path)
        with pytest.raises(CalibrationError) as info:
            bench.calibration()
        assert info.value.line == line and "-53.9165" in info.value.problem

    def test_relaxed_in_the_bench_file_and_recorded(self, tmp_path):
        text = GOOD.replace('file = "cal/hydrophone.csv"',
                            'file = "cal/hydrophone.csv"\nmax_step_db = inf\n'
                            'check_phase_steps = false')
        bench = load_bench(write(tmp_path, text))
        self._typo(tmp_path)
        assert bench.calibration().magnitude_v_per_pa.max() > 1e3
        assert bench.tables["calibration"]["max_step_db"] == float("inf")
        assert bench.tables["calibration"]["check_phase_steps"] is False

    def test_relaxed_by_override(self, tmp_path):
        bench = load_bench(write(tmp_path, GOOD), {"calibration.max_step_db": 250.0})
        self._typo(tmp_path)
        assert bench.calibration().band_hz[0] > 0

    @pytest.mark.parametrize(("line", "words"), [
        ("max_step_db = 0", "max_step_db: must be above 0"),
        ("max_step_db = -5.0", "max_step_db: must be above 0"),
        ("max_step_db = nan", "max_step_db: expected a finite number"),
        ('max_step_db = "20 dB"', "max_step_db: expected a number"),
        ("check_phase_steps = 1", "check_phase_steps: expected true or false"),
        ("max_steps_db = 20", "max_steps_db: unknown key"),
    ])
    def test_bad_values_name_the_key(self, tmp_path, line, words):
        text = GOOD.replace('file = "cal/hydrophone.csv"', f'file = "cal/hydrophone.csv"\n{line}')
        with pytest.raises(ConfigError, match=r"\[calibration\] " + words):
            load_bench(write(tmp_path, text))


class TestCommandText:
    """Digitiser settings become command text: typed, printable ASCII, one command."""

    @pytest.mark.parametrize(("line", "words"), [
        ('coupling = "DC;:CHAN1:RANG 5"', "contains ';'"),
        ('trigger_slope = "POS;*RST"', "contains ';'"),
        ('coupling = "DC\\n"', "line break"),
        ('trigger_source = "EXT\\r"', "line break"),
        ('coupling = "D\u00c7"', "only printable ASCII"),
        ('coupling = "DC\\t"', "only printable ASCII"),
        ("coupling = 5", "expected a non-empty string, got 5"),
        ('trigger_source = ["EXT"]', "expected a non-empty string, got ['EXT']"),
        ("trigger_slope = { word = \"POS\" }", "expected a non-empty string"),
        ('coupling = ""', "expected a non-empty string"),
        ('record_length = "2000"', "expected a whole number"),
        ("range_v = [0.5]", "expected a number"),
    ])
    def test_bad_value_names_file_and_key(self, tmp_path, line, words):
        key = line.split(" =")[0]
        text = GOOD.replace("range_v = 0.5\n", f"range_v = 0.5\n{line}\n")
        if key == "range_v" or key == "record_length":
            text = GOOD.replace(f"{key} = {'0.5' if key == 'range_v' else '2000'}\n", line + "\n")
        path = write(tmp_path, text)
        with pytest.raises(ConfigError) as info:
            load_bench(path)
        message = str(info.value)
        assert message.startswith(f"{path}: [digitiser] {key}:"), message
        assert words in message

    def test_override_from_the_command_line_is_checked_too(self, tmp_path):
        path = write(tmp_path, GOOD)
        with pytest.raises(ConfigError, match=r"\[digitiser\] coupling: .*contains ';'"):
            load_bench(path, {"digitiser.coupling": "AC;*RST"})

    def test_good_words_pass_and_reach_the_settings(self, tmp_path):
        text = GOOD.replace("range_v = 0.5\n",
                            'range_v = 0.5\ncoupling = "AC"\ntrigger_slope = "NEG"\n')
        settings = load_bench(write(tmp_path, text)).digitiser_settings()
        assert (settings.coupling, settings.trigger_slope) == ("AC", "NEG")
