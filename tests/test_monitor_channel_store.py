"""The monitor channel in the session file without instruments: stored exactly as given
(every dtype a profile may send, bit for bit), read back with each cell checked, copied
by replay, and a trace without one next to traces with one."""

from __future__ import annotations

import sqlite3

import h5py
import numpy as np
import pytest
from session_samples import calibration_text, make_raw

from tankside.drivers.trace import ChannelTrace
from tankside.monitor.errors import SessionValueError
from tankside.monitor.outcome import ExitStatus
from tankside.monitor.record.export import export_hdf5
from tankside.monitor.record.replay import replay_session
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata


def _meta():
    return session_metadata(
        configuration={"digitiser": {"range_v": 0.5, "monitor_channel": 4}},
        instruments={"digitiser": {"resource": "TCPIP0::127.0.0.1::1::SOCKET",
                                   "identity": "INVENTED,DIG,0,1"}},
        calibration_text=calibration_text(), calibration_source="cal.csv",
        loading={"hydrophone_capacitance_f": None}, settings={"method": "auto"},
        temperature_c=21.5)


def _channel(seq: int, dtype: str, n: int = 300) -> ChannelTrace:
    rng = np.random.default_rng(seq)
    if dtype == "<f4":
        codes = rng.standard_normal(n).astype("<f4")
        codes[:3] = [np.inf, -0.0, np.float32(1e-45)]     # the awkward ones, as sent
    else:
        info = np.iinfo(np.dtype(dtype))
        codes = rng.integers(info.min, info.max, n, endpoint=True).astype(dtype)
    return ChannelTrace(channel=4, codes=codes, volts_per_code=1.0 / 3.0, offset_v=-0.0125,
                        dt_s=4e-9, t0_s=-1e-6, range_v=None if seq == 1 else 2.0,
                        clipped_low=seq, clipped_high=2 * seq)


DTYPES = ("<i2", ">i2", "|i1", "<f4")


@pytest.fixture
def session(tmp_path):
    path = tmp_path / "m.db"
    store = SessionStore.create(path, _meta())
    given = {}
    for seq in range(5):
        channel = None if seq == 3 else _channel(seq, DTYPES[seq % 4])
        given[seq] = channel
        store.add_trace(make_raw(seq), None, error="not converted here", channel=channel)
    store.close(ExitStatus.COMPLETED, "done", {"traces": 5})
    return path, given


def test_stored_exactly_and_read_back(session):
    path, given = session
    with SessionReader(path) as r:
        assert r.has_monitor_channel()
        for st in r.iter_traces():
            want = given[st.raw.seq]
            got = st.raw.monitor
            if want is None:
                assert got is None
                continue
            assert got is not None
            # the same bytes in the same byte order (numpy's dtype string is kept)
            assert got.codes.dtype == want.codes.dtype
            assert got.codes.tobytes() == want.codes.tobytes()
            assert (got.channel, got.volts_per_code, got.offset_v, got.dt_s, got.t0_s,
                    got.range_v, got.clipped_low, got.clipped_high) == (
                want.channel, want.volts_per_code, want.offset_v, want.dt_s, want.t0_s,
                want.range_v, want.clipped_low, want.clipped_high)
        # one trace read alone carries it too
        assert r.trace(2).raw.monitor.codes.tobytes() == given[2].codes.tobytes()


def test_hdf5_rows_are_nan_where_a_trace_has_no_monitor(session, tmp_path):
    path, given = session
    out = tmp_path / "m.h5"
    export_hdf5(SessionReader(path), out)
    with h5py.File(out, "r") as f:
        g = f["monitor"]
        assert list(g["sample_count"][:]) == [300, 300, 300, 0, 300]
        assert list(g["channel"][:]) == [4, 4, 4, -1, 4]
        assert np.isnan(g["volts"][3]).all() and np.isnan(g["range_v"][1])
        assert g["range_v"][0] == 2.0 and g["range_v"].attrs["units"] == "V"
        # volts = codes * scale + offset, by numpy on the codes given
        for seq in (0, 1, 2, 4):
            want = given[seq].codes.astype(np.float64) * (1.0 / 3.0) - 0.0125
            np.testing.assert_array_equal(g["volts"][seq], want)


def test_replay_copies_the_monitor_channel(session, tmp_path):
    path, given = session
    out = tmp_path / "again.db"
    replay_session(path, out)
    with SessionReader(out) as r:
        for st in r.iter_traces():
            want = given[st.raw.seq]
            if want is None:
                assert st.raw.monitor is None
            else:
                assert st.raw.monitor.codes.tobytes() == want.codes.tobytes()


@pytest.mark.parametrize("column, value, problem", [
    ("dt_s", "'soon'", "dt_s"), ("dt_s", "0.0", "dt_s"), ("volts_per_code", "X'00'", "volts"),
    ("range_v", "-2.0", "range_v"), ("dtype", "'<c16'", "dtype"), ("n", "299", "n"),
    ("clipped_low", "-1", "clipped_low"), ("channel", "0", "channel"),
    ("codes", "'text'", "codes"),
])
def test_a_damaged_cell_is_named(session, column, value, problem):
    path, _ = session
    with sqlite3.connect(path) as conn:
        conn.execute(f"UPDATE trace_channels SET {column} = {value} WHERE seq = 1")
    with SessionReader(path) as r:
        r.trace(0)
        with pytest.raises(SessionValueError) as info:
            r.trace(1)
    message = str(info.value)
    assert "trace_channels" in message and problem in message and "seq 1" in message
