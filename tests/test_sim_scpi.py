"""The simulators' SCPI parser and device base (pure; no sockets).

Sources: SCPI 1999.0 vol. 1 (6.2 header syntax, short/long forms, numeric suffixes,
compound headers after ``;``), vol. 2 ch. 21 (error numbers and texts, queue overflow);
IEEE 488.2-1992 (7.7.6 definite-length block, 10 common commands, 11.5 event status bits).
"""

from __future__ import annotations

import pytest

from tankside.simulators.scpi_device import ScpiDevice
from tankside.simulators.scpi_parser import (
    ESR_CME,
    ESR_EXE,
    ESR_OPC,
    ErrorQueue,
    ScpiError,
    compile_pattern,
    expect_args,
    format_block,
    match_nodes,
    parse_bool,
    parse_choice,
    parse_command,
    parse_integer,
    short_form,
    split_commands,
)


class Toy(ScpiDevice):
    """A small device with a few settings, for testing the base class alone."""

    def __init__(self):
        super().__init__()
        self.points = 100
        self.levels = {1: 0.0, 2: 0.0}
        self.add("ACQuire:POINts", write=self._set_points, query=lambda a, s: str(self.points))
        self.add("ACQuire:SRATe", write=lambda a, s: None, query=lambda a, s: "1e9")
        self.add("CHANnel#:LEVel", write=self._set_level,
                 query=lambda a, s: repr(self.levels[s[0]]))
        self.add("DISPlay:TEXT", write=lambda a, s: setattr(self, "text", a[0]))
        self.add("STATus:DONE", query=lambda a, s: "1")
        self.add("ACQuire:DELay", query=self.number_reply(lambda s: 1e-6 / 3))
        self.add("ACQuire:MODE", query=self.text_reply(lambda s: "NORM"))

    def identity(self):
        return "TOY,1,2,3"

    def reset(self):
        self.points = 100

    def _set_points(self, args, s):
        expect_args(args, 1)
        self.points = parse_integer(args[0], 10, 1000, what="points")

    def _set_level(self, args, s):
        expect_args(args, 1)
        if s[0] not in self.levels:
            raise ScpiError(-113, "no such channel")
        self.levels[s[0]] = float(args[0])


def ask(dev, line):
    reply = dev.handle(line)
    return None if reply is None else reply.decode().rstrip("\n")


def drain(dev):
    out = []
    while True:
        entry = ask(dev, "SYST:ERR?")
        code = int(entry.split(",")[0])
        if code == 0:
            return out
        out.append(code)


class TestShortForm:
    # SCPI 1999.0 vol. 1, 6.2.1: the short form is the upper-case part of the long form.
    @pytest.mark.parametrize("long_form, short", [("ACQuire", "ACQ"), ("POINts", "POIN"),
                                                  ("CHANnel", "CHAN"), ("MEASure", "MEAS"),
                                                  ("ERRor", "ERR"), ("NEXT", "NEXT")])
    def test_upper_case_letters(self, long_form, short):
        assert short_form(long_form) == short

    @pytest.mark.parametrize("typed", ["ACQ:POIN?", "acq:poin?", "ACQUIRE:POINTS?",
                                       "Acquire:Points?", ":acq:points?", "aCq:PoInTs?"])
    def test_short_and_long_forms_any_case(self, typed):
        assert ask(Toy(), typed) == "100"

    @pytest.mark.parametrize("typed", ["ACQU:POIN?", "AC:POIN?", "ACQUI:POINT?", "ACQ:POINTSX?"])
    def test_forms_between_short_and_long_are_undefined(self, typed):
        dev = Toy()
        assert ask(dev, typed) is None
        assert drain(dev) == [-113]


class TestNumericSuffix:
    def test_suffix_selects_the_instance_and_defaults_to_1(self):
        dev = Toy()
        ask(dev, "CHAN2:LEV 0.5")
        ask(dev, "CHANNEL:LEV 0.25")
        assert ask(dev, "chan1:lev?") == "0.25"
        assert ask(dev, "CHANnel2:LEVel?") == "0.5"

    def test_suffix_on_a_node_without_one_is_undefined(self):
        dev = Toy()
        assert ask(dev, "ACQ2:POIN?") is None
        assert drain(dev) == [-113]

    def test_optional_node(self):
        nodes = compile_pattern("SYSTem:ERRor[:NEXT]")
        assert match_nodes(nodes, ("SYST", "ERR")) == ()
        assert match_nodes(nodes, ("system", "error", "next")) == ()
        assert match_nodes(nodes, ("SYST",)) is None


class TestSplitting:
    def test_semicolons_outside_quotes(self):
        assert split_commands('DISP:TEXT "a;b";*IDN?') == ['DISP:TEXT "a;b"', "*IDN?"]
        assert split_commands("A;;B; ") == ["A", "B"]

    def test_unterminated_quote_is_a_syntax_error(self):
        dev = Toy()
        assert ask(dev, 'DISP:TEXT "abc;*IDN?') is None
        assert drain(dev) == [-102]

    def test_parameters(self):
        cmd = parse_command("CHAN1:LEV  1.5 , 'x,y'")
        assert cmd.args == ("1.5", "'x,y'")
        assert not cmd.is_query
        assert parse_command("ACQ:POIN?").is_query

    def test_several_queries_join_with_semicolons(self):
        assert ask(Toy(), "*IDN?;ACQ:POIN?;:STAT:DONE?") == "TOY,1,2,3;100;1"

    def test_compound_header_relative_to_previous_path(self):
        # SCPI 1999.0 vol. 1, 6.2.4: after ';' the header continues at the previous level.
        dev = Toy()
        ask(dev, "ACQ:SRAT 1e9;POIN 500")
        assert ask(dev, "ACQ:POIN?;SRAT?") == "500;1e9"


class TestErrors:
    def test_empty_queue_reads_no_error(self):
        dev = Toy()
        assert ask(dev, "SYST:ERR?") == '0,"No error"'
        assert ask(dev, "SYSTem:ERRor:NEXT?") == '0,"No error"'

    @pytest.mark.parametrize("line, code", [
        ("FOO:BAR 1", -113),        # undefined header
        ("ACQ:POIN", -109),         # missing parameter
        ("ACQ:POIN 5,6", -108),     # parameter not allowed
        ("ACQ:POIN abc", -104),     # data type error
        ("ACQ:POIN 5000", -222),    # data out of range
        ("ACQ:POIN 50.5", -224),    # illegal parameter value
        ("ACQ:P%IN 50", -102),      # syntax error
        ("STAT:DONE 1", -113),      # a query-only header written as a command
    ])
    def test_standard_codes(self, line, code):
        dev = Toy()
        assert ask(dev, line) is None
        assert drain(dev) == [code]

    def test_setting_query_replies(self):
        dev = Toy()
        assert float(ask(dev, "ACQ:DEL?")) == 1e-6 / 3  # repr round-trips a float exactly
        assert ask(dev, "ACQ:MODE?") == "NORM"
        assert drain(dev) == []
        assert ask(dev, "ACQ:DEL? 2") is None
        assert ask(dev, "ACQ:MODE? x") is None
        assert drain(dev) == [-108, -108]  # -108 Parameter not allowed (SCPI vol. 2 ch. 21)

    def test_non_ascii_bytes_are_a_command_error(self):
        dev = Toy()
        assert dev.handle(b"ACQ:POIN\xff 10") is None
        assert drain(dev) == [-100]

    def test_queue_is_first_in_first_out_with_texts(self):
        dev = Toy()
        ask(dev, "FOO")
        ask(dev, "ACQ:POIN 1")
        assert ask(dev, "SYST:ERR?") == '-113,"Undefined header;FOO"'
        assert ask(dev, "SYST:ERR?").startswith('-222,"Data out of range;')
        assert ask(dev, "SYST:ERR?") == '0,"No error"'

    def test_overflow_replaces_the_newest_entry(self):
        # SCPI 1999.0 vol. 2, 21.8.2: the last entry becomes -350 when the queue is full.
        q = ErrorQueue(capacity=4)
        for _ in range(6):
            q.push(-113)
        codes = [q.pop()[0] for _ in range(5)]
        assert codes == [-113, -113, -113, -350, 0]

    def test_cls_clears_queue_and_event_register(self):
        dev = Toy()
        ask(dev, "FOO")
        ask(dev, "*CLS")
        assert ask(dev, "SYST:ERR?") == '0,"No error"'
        assert ask(dev, "*ESR?") == "0"

    def test_command_error_discards_rest_of_message_execution_error_does_not(self):
        dev = Toy()
        ask(dev, "FOO;ACQ:POIN 200")
        assert dev.points == 100
        ask(dev, "ACQ:POIN 5000;:ACQ:POIN 300")
        assert dev.points == 300
        assert drain(dev) == [-113, -222]


class TestCommonCommands:
    def test_idn_rst_opc(self):
        dev = Toy()
        assert ask(dev, "*IDN?") == "TOY,1,2,3"
        ask(dev, "ACQ:POIN 500")
        assert ask(dev, "*RST") is None
        assert dev.points == 100
        assert ask(dev, "*OPC?") == "1"
        assert ask(dev, "*WAI") is None

    def test_event_status_bits(self):
        # IEEE 488.2-1992, 11.5.1.1: bit 0 OPC, bit 4 execution error, bit 5 command error.
        dev = Toy()
        ask(dev, "*OPC")
        assert int(ask(dev, "*ESR?")) == ESR_OPC
        ask(dev, "FOO")
        ask(dev, "ACQ:POIN 1")
        assert int(ask(dev, "*ESR?")) == ESR_CME | ESR_EXE
        assert ask(dev, "*ESR?") == "0"  # reading clears it

    def test_status_byte_reports_error_queue(self):
        dev = Toy()
        assert ask(dev, "*STB?") == "0"
        ask(dev, "FOO")
        assert int(ask(dev, "*STB?")) & 4 == 4

    def test_unknown_common_command(self):
        dev = Toy()
        ask(dev, "*XYZ")
        assert drain(dev) == [-113]


class TestHelpers:
    def test_definite_length_block(self):
        # IEEE 488.2-1992, 7.7.6.2: '#', one digit n, n digits of length, the bytes.
        assert format_block(b"hello") == b"#15hello"
        assert format_block(b"") == b"#10"
        assert format_block(b"x" * 12345) == b"#512345" + b"x" * 12345

    def test_bool_and_choice(self):
        assert parse_bool("on") is True and parse_bool("0") is False
        with pytest.raises(ScpiError) as err:
            parse_bool("maybe")
        assert err.value.code == -224
        choices = {"EXTernal": "EXT", "CHANnel#": "CHAN"}
        assert parse_choice("external", choices) == "EXT"
        assert parse_choice("CHAN2", choices) == "CHAN2"
        assert parse_choice("channel", choices) == "CHAN1"
        with pytest.raises(ScpiError):
            parse_choice("EXTERN", choices)

    def test_interceptor_reports_and_skips(self):
        dev = Toy()
        dev.interceptor = lambda pattern, q: (-200, "forced", False) if (
            pattern == "ACQuire:POINts" and not q) else None
        ask(dev, "ACQ:POIN 500")
        assert dev.points == 100
        assert ask(dev, "ACQ:POIN?") == "100"
        assert drain(dev) == [-200]
