"""CURVE on real sockets (127.0.0.1, free ports): who delivers and who is refused.

The mechanism is ZeroMQ's own (CurveZMQ, rfc.zeromq.org spec 26; ZAP, spec 27) as
implemented by libzmq and pyzmq's ``zmq.auth``; these tests check that lobewatch wires it
so that only the right keys deliver and every refusal is counted.  Waits are bounded
(poll with a timeout); no durations are asserted.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import io
import os
import shutil
import socket
import threading
import time
from pathlib import Path

import pytest
import zmq
import zmq.auth

from stream.alarms import AlarmConfig, AlarmEngine
from stream.curve import AUTH_FAILED, CurveConfig, curve_from_mapping, secret_file_warning
from stream.errors import UserError
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from stream.synth import SynthConfig, run_publisher
from stream.tick import SourceStats
from stream.wire_encode import encode_json_single
from stream.wire_format import REJECT_REASONS
from stream.zmq_source import ZmqSource
from tui.cli import UsageError
from tui.curve_options import check_listen, curve_from_args

pytestmark = pytest.mark.timeout(60)


def free_endpoint() -> str:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return f"tcp://127.0.0.1:{s.getsockname()[1]}"


@pytest.fixture
def keys(tmp_path: Path) -> dict[str, Path]:
    """Key pairs for a monitor, an allowed publisher and a stranger; ``allow`` holds the
    allowed publisher's public certificate only."""
    d = tmp_path / "keys"
    d.mkdir()
    out: dict[str, Path] = {}
    for name in ("monitor", "radio", "stranger"):
        zmq.auth.create_certificates(d, name)
        os.chmod(d / f"{name}.key_secret", 0o600)
        out[name] = d / f"{name}.key_secret"
        out[name + "_pub"] = d / f"{name}.key"
    allow = tmp_path / "allow"
    allow.mkdir()
    shutil.copy(d / "radio.key", allow / "radio.key")
    out["allow"] = allow
    return out


class Pub:
    """A connecting PUB socket (optionally a CURVE client) that sends JSON singles."""

    def __init__(self, endpoint: str, secret: Path | None, server_key: bytes | None) -> None:
        self.ctx = zmq.Context()
        self.sock = self.ctx.socket(zmq.PUB)
        self.sock.linger = 0
        if secret is not None:
            pub, sec = zmq.auth.load_certificate(secret)
            self.sock.curve_publickey, self.sock.curve_secretkey = pub, sec
            self.sock.curve_serverkey = server_key
        self.sock.connect(endpoint)
        self.sent = 0

    def send(self) -> None:
        self.sock.send_multipart(encode_json_single(10.0, -50.0, 1767225600.0 + self.sent,
                                                    seq=self.sent))
        self.sent += 1

    def close(self) -> None:
        self.sock.close(0)
        self.ctx.term()


async def pump(src: ZmqSource, pubs: list[Pub], until, timeout: float = 5.0) -> int:
    """Send from ``pubs`` every 20 ms and receive until ``until(samples, stats)`` holds or
    ``timeout`` passes; returns the samples received."""
    got = 0

    async def receive() -> None:
        nonlocal got
        async for bs in src.batches():
            got += sum(len(b) for b in bs)

    task = asyncio.create_task(receive())
    deadline = time.monotonic() + timeout
    try:
        while time.monotonic() < deadline:
            for p in pubs:
                p.send()
            await asyncio.sleep(0.02)
            if until(got, src.stats(time.time())):
                break
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
    return got


def server_source(keys: dict[str, Path], endpoint: str) -> ZmqSource:
    cfg = CurveConfig.load(keys["monitor"], allow=keys["allow"])
    return ZmqSource(endpoint, bind=True, curve=cfg)


# -- lobewatch binds (CURVE server with an allow list) -------------------------------------

async def test_allowed_publisher_delivers(keys):
    ep = free_endpoint()
    src = server_source(keys, ep)
    pub = Pub(ep, keys["radio"], src.curve.config.public_key)
    try:
        got = await pump(src, [pub], lambda n, st: n >= 20)
    finally:
        pub.close()
        await src.aclose()
    assert got >= 20
    assert AUTH_FAILED not in src.stats(time.time()).rejected


async def test_unknown_publisher_key_is_refused_and_counted(keys):
    ep = free_endpoint()
    src = server_source(keys, ep)
    stranger = Pub(ep, keys["stranger"], src.curve.config.public_key)
    try:
        got = await pump(src, [stranger], lambda n, st: st.rejected.get(AUTH_FAILED, 0) >= 1)
        # the refusal is counted; keep sending a little longer: still nothing arrives
        got += await pump(src, [stranger], lambda n, st: False, timeout=0.5)
    finally:
        stranger.close()
        await src.aclose()
    assert got == 0
    assert src.stats(time.time()).rejected.get(AUTH_FAILED, 0) >= 1


async def test_stranger_refused_while_allowed_publisher_delivers(keys):
    ep = free_endpoint()
    src = server_source(keys, ep)
    good = Pub(ep, keys["radio"], src.curve.config.public_key)
    bad = Pub(ep, keys["stranger"], src.curve.config.public_key)
    try:
        got = await pump(src, [good, bad],
                         lambda n, st: n >= 30 and st.rejected.get(AUTH_FAILED, 0) >= 1)
    finally:
        good.close()
        bad.close()
        await src.aclose()
    # every sample received is the allowed one's (the stranger's would be extra on top)
    assert 30 <= got <= good.sent
    assert src.stats(time.time()).rejected.get(AUTH_FAILED, 0) >= 1


async def test_plain_publisher_to_curve_subscriber_delivers_nothing(keys):
    ep = free_endpoint()
    src = server_source(keys, ep)
    plain = Pub(ep, None, None)
    try:
        got = await pump(src, [plain], lambda n, st: st.rejected.get(AUTH_FAILED, 0) >= 1)
        got += await pump(src, [plain], lambda n, st: False, timeout=0.5)
    finally:
        plain.close()
        await src.aclose()
    assert got == 0 and plain.sent > 0
    assert src.stats(time.time()).rejected.get(AUTH_FAILED, 0) >= 1


async def test_handshake_failures_raise_the_input_alarm_naming_the_reason(keys):
    """Three strangers knocking: counted by the socket, then the existing input alarm
    raises (after its hold time, on an injected clock) and says why."""
    ep = free_endpoint()
    src = server_source(keys, ep)
    strangers: list[Pub] = []
    try:
        for _ in range(3):
            strangers.append(Pub(ep, keys["stranger"], src.curve.config.public_key))
            n_before = len(strangers) - 1
            await pump(src, strangers[-1:],
                       lambda n, st, k=n_before: st.rejected.get(AUTH_FAILED, 0) > k)
        stats = src.stats(time.time())
    finally:
        for p in strangers:
            p.close()
        await src.aclose()
    assert stats.rejected[AUTH_FAILED] >= 3 and "auth_failed" in REJECT_REASONS
    cfg = AlarmConfig(raise_hold_s=2.0)
    mon = Monitor(RollingPattern(EstimatorConfig()), AlarmEngine(cfg))
    before = SourceStats(state="waiting")
    events = []
    for i in range(6):  # one tick per second: the failures land between tick 0 and 1
        events += mon.tick(1000.0 + i, before if i == 0 else stats).events
    raised = [e for e in events if e.data["rule"] == "input"
              and e.data["transition"] == "raise"]
    assert len(raised) == 1
    assert "CURVE" in raised[0].data["message"] and "auth_failed" in raised[0].data["message"]
    # two failures alone (a rate of 0.2/s) stay below both limits
    mon = Monitor(RollingPattern(EstimatorConfig()), AlarmEngine(cfg))
    two = SourceStats(state="waiting", rejected={AUTH_FAILED: 2})
    quiet = [e for i in range(6) for e in mon.tick(1000.0 + i, before if i == 0 else two).events]
    assert not [e for e in quiet if e.data["rule"] == "input"]


# -- lobewatch connects (CURVE client of a publisher that binds) ------------------------------

def start_synth(keys: dict[str, Path], allow: Path) -> tuple[threading.Event, threading.Thread,
                                                            list[str]]:
    cfg = CurveConfig.load(keys["radio"], allow=allow)
    stop = threading.Event()
    ready: list[str] = []
    th = threading.Thread(target=run_publisher,
                          args=("tcp://127.0.0.1:*", SynthConfig(rate_sps=2000, batch=100), stop),
                          kwargs={"on_ready": ready.append, "curve": cfg}, daemon=True)
    th.start()
    deadline = time.monotonic() + 5
    while not ready and time.monotonic() < deadline:
        time.sleep(0.01)
    assert ready, "publisher did not bind"
    return stop, th, ready


async def collect(src: ZmqSource, n: int, timeout: float) -> int:
    got = 0

    async def run() -> None:
        nonlocal got
        async for bs in src.batches():
            got += sum(len(b) for b in bs)
            if got >= n:
                return

    with contextlib.suppress(TimeoutError):
        await asyncio.wait_for(run(), timeout)
    return got


async def test_right_server_key_delivers_from_a_curve_publisher(keys, tmp_path):
    allow = tmp_path / "subscribers"
    allow.mkdir()
    shutil.copy(keys["monitor_pub"], allow)
    stop, th, ready = start_synth(keys, allow)
    src = ZmqSource(ready[0], curve=CurveConfig.load(keys["monitor"],
                                                     server=keys["radio_pub"]))
    try:
        got = await collect(src, 1000, 10.0)
    finally:
        stop.set()
        th.join(5)
        await src.aclose()
    assert got >= 1000


async def test_wrong_server_key_delivers_nothing(keys, tmp_path):
    allow = tmp_path / "subscribers"
    allow.mkdir()
    shutil.copy(keys["monitor_pub"], allow)
    stop, th, ready = start_synth(keys, allow)
    # we expect the stranger's key: the real publisher cannot prove it holds that secret
    wrong = ZmqSource(ready[0], curve=CurveConfig.load(keys["monitor"],
                                                       server=keys["stranger_pub"]))
    plain = ZmqSource(ready[0])  # and a subscriber without CURVE gets nothing either
    try:
        got_wrong, got_plain = await asyncio.gather(collect(wrong, 1, 1.5),
                                                    collect(plain, 1, 1.5))
    finally:
        stop.set()
        th.join(5)
        await wrong.aclose()
        await plain.aclose()
    assert got_wrong == 0 and got_plain == 0


async def test_unlisted_subscriber_gets_nothing_from_a_curve_publisher(keys, tmp_path):
    allow = tmp_path / "subscribers"
    allow.mkdir()  # the monitor's key is not copied in: not allowed
    shutil.copy(keys["stranger_pub"], allow)
    stop, th, ready = start_synth(keys, allow)
    src = ZmqSource(ready[0], curve=CurveConfig.load(keys["monitor"],
                                                     server=keys["radio_pub"]))
    try:
        got = await collect(src, 1, 1.5)
    finally:
        stop.set()
        th.join(5)
        await src.aclose()
    assert got == 0


# -- key files and options --------------------------------------------------------------------

def test_readable_secret_file_gives_a_warning(keys):
    assert secret_file_warning(keys["monitor"]) is None
    assert CurveConfig.load(keys["monitor"], allow=keys["allow"]).warnings == ()
    for mode in (0o640, 0o604, 0o644):
        os.chmod(keys["monitor"], mode)
        w = secret_file_warning(keys["monitor"])
        assert w is not None and f"{mode:04o}" in w and "chmod 600" in w
        assert CurveConfig.load(keys["monitor"], allow=keys["allow"]).warnings == (w,)
    err = io.StringIO()
    args = argparse.Namespace(curve_secret=str(keys["monitor"]), curve_server=None,
                              curve_allow=str(keys["allow"]))
    assert curve_from_args(args, bind=True, warn=err) is not None
    assert err.getvalue().count("\n") == 1 and "can be read by other users" in err.getvalue()


def test_bad_key_files_are_one_line_errors(keys, tmp_path):
    with pytest.raises(UserError, match="only a public key"):
        CurveConfig.load(keys["monitor_pub"], allow=keys["allow"])
    with pytest.raises(UserError, match="no such file"):
        CurveConfig.load(tmp_path / "nope.key_secret", server=keys["radio_pub"])
    junk = tmp_path / "junk.key"
    junk.write_text("hello\n")
    with pytest.raises(UserError, match="not a CURVE certificate"):
        CurveConfig.load(keys["monitor"], server=junk)
    with pytest.raises(UserError, match="exactly one of"):
        CurveConfig.load(keys["monitor"])
    with pytest.raises(UserError, match="not a directory"):
        CurveConfig.load(keys["monitor"], allow=junk)
    empty = tmp_path / "empty"
    empty.mkdir()
    assert "no .key files" in CurveConfig.load(keys["monitor"], allow=empty).warnings[0]


@pytest.mark.parametrize(("kw", "bind", "match"), [
    ({"curve_server": "x.key"}, False, "need --curve-secret"),
    ({"curve_secret": "s", "curve_server": "x.key"}, True, "is for connecting"),
    ({"curve_secret": "s", "curve_allow": "d"}, False, "is for binding"),
    ({"curve_secret": "s"}, True, "needs --curve-allow"),
    ({"curve_secret": "s"}, False, "needs --curve-server"),
])
def test_option_combinations_are_checked(kw, bind, match):
    args = argparse.Namespace(**{"curve_secret": None, "curve_server": None,
                                 "curve_allow": None, **kw})
    with pytest.raises(UsageError, match=match) as exc:
        curve_from_args(args, bind=bind)
    assert "\n" not in str(exc.value)


def test_listening_rule(keys):
    cfg = CurveConfig.load(keys["monitor"], allow=keys["allow"])
    for ep in ("tcp://127.0.0.1:5557", "tcp://localhost:5557", "tcp://[::1]:5557",
               "ipc:///tmp/x.sock", "inproc://x"):
        check_listen(ep, curve=None, insecure=False, what="x")  # local: fine
    for ep in ("tcp://0.0.0.0:5557", "tcp://*:5557", "tcp://192.0.2.7:5557",
               "tcp://eth0:5557"):
        with pytest.raises(UsageError, match="--insecure-listen"):
            check_listen(ep, curve=None, insecure=False, what="x")
        check_listen(ep, curve=cfg, insecure=False, what="x")  # CURVE: fine, silent
        err = io.StringIO()
        check_listen(ep, curve=None, insecure=True, what="send samples", warn=err)
        line = err.getvalue()
        assert line.count("\n") == 1 and "anyone who can reach" in line
        assert "send samples" in line


def test_curve_from_mapping(keys, tmp_path):
    assert curve_from_mapping({"endpoint": "tcp://127.0.0.1:1"}) is None
    base = keys["monitor"].parent
    cfg = curve_from_mapping({"curve_secret": "monitor.key_secret",
                              "curve_server": "radio.key"}, base_dir=base)
    assert cfg is not None and not cfg.is_server
    assert cfg.server_key == zmq.auth.load_certificate(keys["radio_pub"])[0]
    cfg = curve_from_mapping({"curve_secret": str(keys["monitor"]),
                              "curve_allow": str(keys["allow"])})
    assert cfg is not None and cfg.is_server and cfg.allowed_keys == 1
    with pytest.raises(UserError, match=r"\[streams.a\]: curve_server / curve_allow need"):
        curve_from_mapping({"curve_server": "radio.key"}, where="[streams.a]")
    with pytest.raises(UserError, match="curve_secret must be"):
        curve_from_mapping({"curve_secret": 3})
    with pytest.raises(UserError, match=r"^\[streams.b\]: curve_secret .*no such file"):
        curve_from_mapping({"curve_secret": "nope", "curve_server": "radio.key"},
                           where="[streams.b]", base_dir=base)
