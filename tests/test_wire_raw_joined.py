"""Raw float32 pairs parsed joined per drain (``Decoder._raw_joined``): the same samples,
counts and refusals as decoding each message on its own.

Reference: the frames are little-endian IEEE 754 binary32 pairs (angle, power); numpy's
``frombuffer(..., "<f4")`` on each frame alone is the independent reading.
"""

from __future__ import annotations

import numpy as np

from stream.wire import Decoder
from stream.wire_encode import encode_raw_f32


def _frames(n_msgs: int, size: int, seed: int = 0) -> list[list[bytes]]:
    rng = np.random.default_rng(seed)
    return [encode_raw_f32(rng.uniform(-90, 90, size), rng.uniform(-80, -20, size))
            for _ in range(n_msgs)]


def test_a_drain_gives_every_sample_in_order_in_capped_batches() -> None:
    msgs = _frames(20, 1000)
    dec = Decoder("raw-f32", merge_samples=4096)
    out = dec.decode_many(msgs, 5.0)
    want = np.concatenate([np.frombuffer(m[0], "<f4").reshape(-1, 2) for m in msgs])
    got_a = np.concatenate([b.angle_deg for b in out])
    got_p = np.concatenate([b.power_db for b in out])
    assert np.array_equal(got_a, want[:, 0].astype(np.float64))
    assert np.array_equal(got_p, want[:, 1].astype(np.float64))
    assert [len(b) for b in out] == [4000] * 5  # whole messages, at most 4096 samples
    assert all(b.t.shape == (len(b),) and np.all(b.t == 5.0) for b in out)
    assert all(b.rx_t == 5.0 and not b.calibrated for b in out)
    assert dec.messages == 20 and dec.samples == 20_000 and not dec.rejected


def test_bad_frames_are_refused_one_by_one_and_the_rest_kept() -> None:
    msgs = _frames(6, 100)
    msgs[1] = [msgs[1][0][:-4]]  # not a multiple of 8 bytes
    pairs = np.frombuffer(msgs[3][0], "<f4").copy().reshape(-1, 2)
    pairs[7, 0] = 720.0  # an angle out of range
    msgs[3] = [pairs.tobytes()]
    joined = Decoder("raw-f32")
    one_by_one = Decoder("raw-f32")
    got = joined.decode_many(msgs, 1.0)
    ref = [b for m in msgs if (b := one_by_one.decode(m, 1.0)) is not None]
    assert joined.rejected == one_by_one.rejected and sum(joined.rejected.values()) == 2
    assert joined.messages == one_by_one.messages == 4
    assert np.array_equal(np.concatenate([b.angle_deg for b in got]),
                          np.concatenate([b.angle_deg for b in ref]))
