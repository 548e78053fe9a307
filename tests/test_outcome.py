"""Exit statuses and exit codes (tankside.monitor.outcome): one declaration, used by the
session, its child process and the CLI; the core does not import the user-facing side."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from tankside.monitor import cli
from tankside.monitor.outcome import ExitCode, ExitStatus

ROOT = Path(__file__).resolve().parents[1]


def test_stored_status_strings_are_those_of_existing_session_files():
    # Session files already written hold these strings in session_stop.exit_status;
    # renaming one would make old files read differently.
    assert {s.value for s in ExitStatus} == {
        "completed", "ok", "operator", "stopped-by-rule", "instrument-failure",
        "internal-error", "error", "store-error", "drive-may-be-on"}


def test_the_worse_status_has_the_higher_rank():
    order = [ExitStatus.COMPLETED, ExitStatus.OPERATOR, ExitStatus.STOPPED_BY_RULE,
             ExitStatus.INSTRUMENT_FAILURE, ExitStatus.INTERNAL_ERROR, ExitStatus.STORE_ERROR,
             ExitStatus.DRIVE_MAY_BE_ON]
    ranks = [s.rank for s in order]
    assert ranks == sorted(ranks) and len(set(ranks)) == len(ranks)


@pytest.mark.parametrize("status", list(ExitStatus), ids=str)
def test_every_status_has_an_exit_code(status):
    assert isinstance(status.exit_code, ExitCode)


def test_each_kind_of_failure_has_its_own_code():
    codes = {s: s.exit_code for s in ExitStatus}
    assert codes[ExitStatus.COMPLETED] == codes[ExitStatus.OPERATOR] == ExitCode.OK == 0
    failures = [codes[s] for s in (ExitStatus.STOPPED_BY_RULE, ExitStatus.INSTRUMENT_FAILURE,
                                   ExitStatus.INTERNAL_ERROR, ExitStatus.STORE_ERROR)]
    assert len(set(failures)) == 4 and ExitCode.OK not in failures
    assert ExitCode.USAGE not in codes.values()   # 2 is the CLI's, for an expected failure


def _documented_codes(text: str, pattern: str) -> dict[int, str]:
    return {int(m.group(1)): m.group(2).strip() for m in re.finditer(pattern, text, re.M)}


def test_readme_table_lists_every_exit_code():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    table = readme.split("### Exit codes", 1)[1].split("\n## ", 1)[0]
    documented = _documented_codes(table, r"^\| (\d+) \| (.+) \|$")
    assert sorted(documented) == sorted(int(c) for c in ExitCode)
    assert "internal error" in documented[ExitCode.INTERNAL]


def test_cli_docstring_lists_every_exit_code():
    documented = _documented_codes(cli.__doc__, r"^(\d+)  (.+)$")
    assert sorted(documented) == sorted(int(c) for c in ExitCode)
