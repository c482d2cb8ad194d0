"""Wire format v1: decoding, rejection reasons, seq accounting, fuzzing."""

from __future__ import annotations

import json
import struct

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stream.wire import Decoder
from stream.wire_encode import (
    encode_binary_batch,
    encode_json_batch,
    encode_json_single,
    encode_raw_f32,
)
from stream.wire_format import REJECT_REASONS, decode_json_object

RX = 1767225600.0


def one(frames, fmt="auto", **kw):
    d = Decoder(fmt, **kw)
    return d, d.decode(frames, RX)


# -- accepted shapes ---------------------------------------------------------------------
def test_json_single_example_from_the_docs():
    d, b = one([b'{"angle_deg": 12.5, "power_dbm": -31.2, "t": 1767225600.125, "seq": 42}'])
    assert b is not None and len(b) == 1
    assert b.angle_deg[0] == 12.5 and b.power_db[0] == -31.2 and b.t[0] == 1767225600.125
    assert b.calibrated and b.rx_t == RX
    assert d.messages == 1 and not d.rejected


def test_json_single_uncalibrated_without_t_gets_receive_time():
    _, b = one([b'{"angle_deg": -180, "power_db": -200}'])
    assert b is not None and not b.calibrated
    assert b.t[0] == RX and b.angle_deg[0] == -180.0 and b.power_db[0] == -200.0


def test_json_batch_with_t_array_and_with_t0_dt():
    _, b = one(encode_json_batch([1.0, 2.0, 3.0], [-40.0, -41.0, -42.0], t=[5.0, 6.0, 7.0],
                                 seq=3, epoch="e"))
    assert b is not None and b.t.tolist() == [5.0, 6.0, 7.0] and b.seq == 3 and b.epoch == "e"
    _, b = one(encode_json_batch([1.0, 2.0, 3.0], [-40.0, -41.0, -42.0], t0=10.0, dt=0.5))
    assert b is not None and b.t.tolist() == [10.0, 10.5, 11.0]


@pytest.mark.parametrize("dtype", ["<f8", "<f4"])
def test_binary_batch_roundtrip(dtype):
    rng = np.random.default_rng(3)
    a = rng.uniform(-180, 359, 1000)
    p = rng.uniform(-120, 0, 1000)
    t = RX + np.arange(1000) * 1e-4
    _, b = one(encode_binary_batch(a, p, t, seq=9, epoch="x", dtype=dtype))
    assert b is not None and len(b) == 1000
    tol = 0 if dtype == "<f8" else 1e-4
    np.testing.assert_allclose(b.angle_deg, a, rtol=tol, atol=tol)
    np.testing.assert_allclose(b.power_db, p, rtol=tol, atol=tol)
    if dtype == "<f8":
        np.testing.assert_array_equal(b.t, t)
    assert b.angle_deg.dtype == np.float64


def test_binary_f8_decode_is_zero_copy():
    frames = encode_binary_batch(np.arange(10.0), -np.arange(10.0) - 1, dtype="<f8")
    _, b = one(frames)
    assert b is not None
    assert np.shares_memory(b.angle_deg, np.frombuffer(frames[1], dtype="<f8"))


def test_binary_layout_is_field_major_by_hand():
    """The documented layout written without the encoder: all angles, then all powers."""
    hdr = json.dumps({"v": 1, "count": 3, "dtype": "<f4",
                      "fields": ["angle_deg", "power_db"]}).encode()
    data = struct.pack("<6f", 1, 2, 3, -10, -20, -30)
    _, b = one([hdr, data])
    assert b is not None
    assert b.angle_deg.tolist() == [1, 2, 3] and b.power_db.tolist() == [-10, -20, -30]


def test_topic_frame_is_the_stream_name():
    _, b = one(encode_json_single(1.0, -40.0, topic=b"mast-a"))
    assert b is not None and b.stream == "mast-a"
    _, b = one(encode_binary_batch([1.0], [-40.0], topic=b"mast-b"))
    assert b is not None and b.stream == "mast-b"


def test_raw_f32_pairs_only_when_asked():
    frames = encode_raw_f32(np.array([1.0, 2.0]), np.array([-40.0, -41.0]))
    _, b = one(frames, fmt="raw-f32")
    assert b is not None and b.angle_deg.tolist() == [1.0, 2.0] and not b.calibrated
    d, b = one(frames)  # auto: not JSON
    assert b is None and d.rejected == {"bad_json": 1}


# -- rejections ----------------------------------------------------------------------------
@pytest.mark.parametrize("frames,reason", [
    ([b"{not json"], "bad_json"),
    ([b'"just a string"'], "bad_json"),
    ([b'{"angle_deg": "12", "power_dbm": -3}'], "bad_type"),
    ([b'{"angle_deg": true, "power_dbm": -3}'], "bad_type"),
    ([b'{"angle_deg": [[1]], "power_dbm": [-3]}'], "bad_type"),
    ([b'{"power_dbm": -3}'], "missing_field"),
    ([b'{"angle_deg": 1}'], "missing_field"),
    ([b'{"angle_deg": [1, 2], "power_dbm": [-3]}'], "ragged"),
    ([b'{"angle_deg": [1, 2], "power_dbm": [-3, -4], "t": [1]}'], "ragged"),
    ([b'{"angle_deg": [], "power_dbm": []}'], "empty"),
    ([b""], "empty"),
    ([b'{"angle_deg": NaN, "power_dbm": -3}'], "non_finite"),
    ([b'{"angle_deg": 1, "power_dbm": -Infinity}'], "non_finite"),
    ([b'{"angle_deg": 1, "power_dbm": -3, "t": NaN}'], "non_finite"),
    ([b'{"angle_deg": 360, "power_dbm": -3}'], "angle_range"),
    ([b'{"angle_deg": -180.001, "power_dbm": -3}'], "angle_range"),
    ([b'{"angle_deg": 1, "power_dbm": 60.5}'], "power_range"),
    ([b'{"angle_deg": 1, "power_dbm": -201}'], "power_range"),
    ([b'{"v": 2, "angle_deg": 1, "power_dbm": -3}'], "unknown_version"),
    ([b"a", b"b", b"c", b"d"], "too_many_parts"),
    ([b'{"v":1,"count":2,"dtype":"<f8","fields":["angle_deg","power_db"]}', b"\0" * 31],
     "bad_binary"),
    ([b'{"v":1,"count":2,"dtype":">f8","fields":["angle_deg","power_db"]}', b"\0" * 32],
     "bad_binary"),
    ([b'{"v":1,"count":10000000000,"dtype":"<f8","fields":["angle_deg","power_db"]}', b""],
     "oversize"),
    ([b'{"v":1,"count":0,"dtype":"<f8","fields":["angle_deg","power_db"]}', b""], "empty"),
    ([b'{"v":3,"count":1,"dtype":"<f8","fields":["angle_deg","power_db"]}', b"\0" * 16],
     "unknown_version"),
])
def test_rejection_reasons(frames, reason):
    assert reason in REJECT_REASONS
    d, b = one(frames)
    assert b is None
    assert d.rejected == {reason: 1}
    assert d.messages == 0


def test_oversize_message_bytes():
    d, b = one([json.dumps({"angle_deg": [1.0] * 500, "power_dbm": [-3.0] * 500}).encode()],
               max_message_bytes=1000)
    assert b is None and d.rejected == {"oversize": 1}


def test_binary_non_finite_and_range():
    d, b = one(encode_binary_batch([1.0, np.nan], [-3.0, -3.0]))
    assert b is None and d.rejected == {"non_finite": 1}
    d, b = one(encode_binary_batch([1.0, 400.0], [-3.0, -3.0]))
    assert b is None and d.rejected == {"angle_range": 1}


def test_decode_json_object_raises_value_error_with_reason():
    b = decode_json_object({"angle_deg": [1, 2], "power_db": [-1, -2]}, RX)
    assert len(b) == 2 and not b.calibrated
    with pytest.raises(ValueError) as exc:
        decode_json_object({"angle_deg": 500, "power_db": -1}, RX)
    assert exc.value.reason == "angle_range"  # type: ignore[attr-defined]


# -- seq accounting ------------------------------------------------------------------------
def _singles(seqs, epoch="e1"):
    return [encode_json_single(1.0, -40.0, RX, s, epoch) for s in seqs]


def test_gap_counts_lost_messages():
    d = Decoder()
    d.decode_many(_singles([0, 1, 2, 5, 6, 10]), RX)
    assert d.lost == 2 + 3 and d.restarts == 0 and d.messages == 6


def test_first_contact_is_not_a_loss():
    d = Decoder()
    d.decode_many(_singles([1000, 1001]), RX)
    assert d.lost == 0


def test_new_epoch_is_a_restart_and_its_missing_start_is_slow_joiner_not_loss():
    """A restart is not input trouble: the new publisher's first messages sent before
    we reconnected are counted apart (lost_after_restart), never in lost."""
    d = Decoder()
    d.decode_many(_singles([50, 51]), RX)
    d.decode_many(_singles([3, 4, 5], epoch="e2"), RX + 1)
    s = d.stats("receiving")
    assert s.restarts == 1 and s.lost == 0 and s.lost_after_restart == 3
    assert d.last_restart_rx == RX + 1 and s.senders == 1


def test_duplicate_and_backward_seq_are_their_own_reasons():
    d = Decoder()
    out = d.decode_many(_singles([0, 1, 2, 2, 1, 3]), RX)
    assert sum(len(b) for b in out) == 4 and d.messages == 4
    assert d.rejected == {"duplicate": 1, "seq_backward": 1} and d.lost == 0
    assert d.reject_examples["duplicate"].startswith('{"angle_deg"')
    # the same through the slow path (binary batches)
    d = Decoder()
    for s in (0, 1, 1, 0, 2):
        d.decode(encode_binary_batch([1.0], [-3.0], seq=s, epoch="e"), RX)
    assert d.messages == 3 and d.rejected == {"duplicate": 1, "seq_backward": 1}


def test_two_senders_on_one_topic_are_recognised_not_hundreds_of_restarts():
    d = Decoder()
    msgs = []
    for i in range(100):
        msgs += _singles([1000 + i], epoch="a") + _singles([i], epoch="b")
    for k in range(0, len(msgs), 7):  # drains of any size
        d.decode_many(msgs[k:k + 7], RX)
    s = d.stats("receiving")
    assert s.messages == 200 and s.restarts == 0 and s.lost == 0
    assert s.lost_after_restart == 0 and s.senders == 2 and not s.rejected


def test_real_restarts_still_count_after_senders_are_known():
    d = Decoder()
    for k, ep in enumerate("pqrs"):
        d.decode_many(_singles(range(5 * k, 5 * k + 5), epoch=ep), RX)
    assert d.restarts == 3 and d.senders == 1 and d.lost == 0


@pytest.mark.parametrize("first", [5000, 50])
def test_epochless_numbering_that_starts_again_is_a_restart(first):
    d = Decoder()
    d.decode_many(_singles([first, first + 1, first + 1], epoch=None), RX)
    d.decode_many(_singles([0, 1], epoch=None), RX)
    assert d.restarts == 1 and d.lost == 0 and d.messages == 4
    assert d.rejected == {"duplicate": 1}


def test_refused_message_without_readable_seq_fills_the_gap_not_lost():
    msgs = _singles([0, 1]) + [[b"{broken"], [b'{"v": 1, "seq": "x"}']] + _singles([4])
    d = Decoder()
    d.decode_many(msgs, RX)
    assert d.rejected == {"bad_json": 1, "missing_field": 1} and d.lost == 0
    assert d.messages + sum(d.rejected.values()) + d.lost == 5


def test_rejected_binary_batch_with_seq_is_not_also_lost():
    d = Decoder()
    d.decode(encode_binary_batch([1.0], [-3.0], seq=0, epoch="e"), RX)
    d.decode(encode_binary_batch([1.0, 999.0], [-3.0, -3.0], seq=1, epoch="e"), RX)
    d.decode(encode_binary_batch([1.0], [-3.0], seq=2, epoch="e"), RX)
    assert d.rejected == {"angle_range": 1} and d.lost == 0 and d.messages == 2


def test_shed_messages_are_lost_once():
    d = Decoder()
    d.decode_many(_singles([0]), RX)
    d.shed_messages(3)
    d.decode_many(_singles([4]), RX)
    s = d.stats()
    assert s.lost == 3 and s.shed == 3 and s.messages == 2


@pytest.mark.parametrize("payload,reason", [
    (b'{"angle_deg": 1' + b"0" * 310 + b', "power_dbm": -3}', "out_of_range"),
    (b'{"angle_deg": [1, 1' + b"0" * 310 + b'], "power_dbm": [-3, -3]}', "out_of_range"),
    (b'{"angle_deg": 1, "power_dbm": -3, "t": 1' + b"0" * 310 + b"}", "out_of_range"),
    (b'{"v": 1, "angle_deg": [1], "power_dbm": [-3], "t0": 1' + b"0" * 310 + b"}",
     "out_of_range"),
    (b'{"angle_deg": 1, "power_dbm": -3, "seq": 1' + b"0" * 310 + b"}", "out_of_range"),
])
def test_huge_integer_literals_are_out_of_range_not_internal_error(payload, reason):
    d, b = one([payload])
    assert b is None and d.rejected == {reason: 1}


def test_huge_binary_count_is_out_of_range():
    hdr = b'{"v":1,"count":1' + b"0" * 40 + b',"fields":["angle_deg","power_db"]}'
    d, b = one([hdr, b"\0" * 16])
    assert b is None and set(d.rejected) <= {"out_of_range", "oversize"}
    assert "internal_error" not in d.rejected


def test_scalar_t_in_a_json_batch_means_all_samples_at_t():
    d, b = one([b'{"angle_deg": [1, 2, 3], "power_dbm": [-3, -4, -5], "t": 1767225601.5}'])
    assert b is not None and list(b.t) == [1767225601.5] * 3


def test_reject_examples_keep_the_first_offending_message_start():
    d = Decoder()
    d.decode_many([[b'{"angle_deg": 500, "power_dbm": -3, "note": "first"}'],
                   [b'{"angle_deg": 600, "power_dbm": -3}'], [b"\xff\xfe" + b"x" * 200]], RX)
    ex = d.stats().reject_examples
    assert ex["angle_range"] == '{"angle_deg": 500, "power_dbm": -3, "note": "first"}'
    assert ex["bad_json"].startswith("\\xff\\xfe") and ex["bad_json"].endswith("...")


def test_rejected_message_with_readable_seq_is_not_also_lost():
    msgs = _singles([0, 1])
    msgs.append([b'{"angle_deg": 999, "power_dbm": -3, "seq": 2, "epoch": "e1"}'])
    msgs += _singles([3])
    d = Decoder()
    d.decode_many(msgs, RX)
    assert d.lost == 0 and d.rejected == {"angle_range": 1} and d.messages == 3


def test_seq_per_topic():
    d = Decoder()
    for s in range(3):
        d.decode(encode_json_single(1, -3, None, s, "e", topic=b"a"), RX)
        d.decode(encode_json_single(1, -3, None, s * 2, "e", topic=b"b"), RX)
    assert d.lost == 2  # stream b skips 1 and 3


def test_singles_of_one_drain_are_merged_in_order():
    d = Decoder()
    msgs = _singles(range(100))
    msgs.insert(50, encode_binary_batch([7.0, 8.0], [-1.0, -2.0]))
    out = d.decode_many(msgs, RX)
    assert [len(b) for b in out] == [50, 2, 50]
    assert d.samples == 102 and d.messages == 101


def test_braces_inside_strings_do_not_misalign_merged_singles():
    # Two frames that only parse as one object when joined: must not be merged.
    msgs = [[b'{"angle_deg":1,"power_dbm":-3,"x":"}'], [b'{","y":1}'],
            [b'{"angle_deg":2,"power_dbm":-4}'], [b'{"angle_deg":3,"power_dbm":-5}']]
    d = Decoder()
    out = d.decode_many(msgs, RX)
    assert d.rejected == {"bad_json": 2}
    assert np.concatenate([b.angle_deg for b in out]).tolist() == [2.0, 3.0]


# -- property-based fuzzing ----------------------------------------------------------------
json_leaf = st.one_of(st.none(), st.booleans(), st.integers(-10**30, 10**30),
                      st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8))
json_val = st.recursive(json_leaf, lambda c: st.one_of(
    st.lists(c, max_size=5), st.dictionaries(st.text(max_size=10), c, max_size=5)),
    max_leaves=20)
keys = st.sampled_from(["angle_deg", "power_dbm", "power_db", "t", "t0", "dt", "seq",
                        "epoch", "v", "count", "dtype", "fields"])
near_valid = st.dictionaries(keys, json_val, max_size=8)


def _dump(obj) -> bytes:
    return json.dumps(obj).encode()


junk_message = st.one_of(
    st.lists(st.binary(max_size=64), min_size=0, max_size=5),
    st.builds(lambda o: [_dump(o)], json_val),
    st.builds(lambda o: [_dump(o)], near_valid),
    st.builds(lambda h, b: [_dump(h), b], near_valid, st.binary(max_size=64)),
    st.builds(lambda n, cut: [_dump({"v": 1, "count": n, "dtype": "<f8",
                                     "fields": ["t", "angle_deg", "power_dbm"]}),
                              b"\0" * cut],
              st.integers(-5, 10**18), st.integers(0, 200)),
)


def _valid_message(i: int):
    kind = i % 3
    if kind == 0:
        return encode_json_single(float(i % 300) - 100, -50.0, RX + i, None, None), 1
    if kind == 1:
        return encode_json_batch([1.0, 2.0], [-3.0, -4.0], t0=RX, dt=0.1), 2
    return encode_binary_batch(np.array([5.0, 6.0, 7.0]), np.array([-1.0, -2.0, -3.0]),
                               np.array([RX, RX, RX])), 3


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(junk_message, max_size=12))
def test_fuzz_never_raises_and_counts_every_message(messages):
    d = Decoder(max_message_bytes=4096)
    out = d.decode_many(messages, RX)
    n_rej = sum(d.rejected.values())
    assert "internal_error" not in d.rejected
    assert d.messages + n_rej == len(messages)
    assert sum(len(b) for b in out) == d.samples
    for b in out:
        assert np.all(np.isfinite(b.angle_deg)) and np.all(np.isfinite(b.power_db))
        assert np.all((b.angle_deg >= -180) & (b.angle_deg < 360))
        assert np.all((b.power_db >= -200) & (b.power_db <= 60))
        assert len(b.t) == len(b.angle_deg) == len(b.power_db)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(junk_message, max_size=8))
def test_fuzz_valid_messages_among_junk_are_all_accepted(junk):
    msgs = []
    expect = 0
    for i, j in enumerate(junk):
        m, n = _valid_message(i)
        msgs.append(m)
        expect += n
        msgs.append(j)
    d = Decoder(max_message_bytes=4096)
    out = d.decode_many(msgs, RX)
    # every valid message is in, whatever the junk did (junk may also be valid)
    valid = sum(len(b) for b in out)
    assert valid >= expect
    assert d.messages + sum(d.rejected.values()) == len(msgs)
    assert "internal_error" not in d.rejected
    # one at a time gives the same counts as the whole drain
    d1 = Decoder(max_message_bytes=4096)
    for m in msgs:
        d1.decode(m, RX)
    assert d1.rejected == d.rejected and d1.samples == d.samples


@settings(max_examples=100, deadline=None)
@given(st.integers(1, 50), st.integers(0, 400), st.sampled_from(["<f8", "<f4"]))
def test_fuzz_truncated_binary_is_bad_binary(n, cut, dtype):
    frames = encode_binary_batch(np.zeros(n), np.full(n, -3.0), np.full(n, RX), dtype=dtype)
    data = frames[1][:cut]
    d = Decoder()
    b = d.decode([frames[0], data], RX)
    if cut >= len(frames[1]):
        assert b is not None and len(b) == n
    else:
        assert b is None and d.rejected == {"bad_binary": 1}


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=256))
def test_fuzz_raw_f32_random_bytes(data):
    d = Decoder("raw-f32")
    b = d.decode([data], RX)
    assert (b is None) == (sum(d.rejected.values()) == 1)
    if b is not None:
        assert len(b) == len(data) // 8 and np.all(np.isfinite(b.power_db))
    assert "internal_error" not in d.rejected
