"""``lobewatch keys new / show`` and the CURVE options of ``live`` and ``synth``.

Outside references: libzmq's ``zmq_curve_public`` (pyzmq ``zmq.curve_public``) derives
the public key from the secret one, so a pair is checked against libzmq itself, and
``zmq.auth.load_certificate`` (pyzmq) must read the files.  Mode 0600 for a private key
is common practice (ssh refuses identity files readable by others).
"""

from __future__ import annotations

import json
import os
import socket
import stat
import subprocess
import sys
import time
from pathlib import Path

import pytest
import zmq
import zmq.auth

from tui.cli import main

ROOT = Path(__file__).resolve().parents[1]


def test_new_writes_a_pair_libzmq_agrees_with(tmp_path, capsys):
    assert main(["keys", "new", "radio", "monitor", "--dir", str(tmp_path / "k")]) == 0
    out = capsys.readouterr().out
    for name in ("radio", "monitor"):
        pub_file, sec_file = tmp_path / "k" / f"{name}.key", tmp_path / "k" / f"{name}.key_secret"
        assert f"{pub_file}" in out and f"{sec_file}" in out
        public, none = zmq.auth.load_certificate(pub_file)
        public2, secret = zmq.auth.load_certificate(sec_file)
        assert none is None and secret is not None and public == public2
        assert zmq.curve_public(secret) == public  # libzmq derives the same public key
        assert stat.S_IMODE(os.stat(sec_file).st_mode) == 0o600
        assert not stat.S_IMODE(os.stat(pub_file).st_mode) & 0o022
    # no leftovers of the private staging folder
    assert sorted(p.name for p in (tmp_path / "k").iterdir()) == [
        "monitor.key", "monitor.key_secret", "radio.key", "radio.key_secret"]


def test_secret_is_0600_even_with_a_permissive_umask(tmp_path):
    old = os.umask(0)
    try:
        assert main(["keys", "new", "a", "--dir", str(tmp_path)]) == 0
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(tmp_path / "a.key_secret").st_mode) == 0o600


@pytest.mark.parametrize("existing", ["x.key", "x.key_secret"])
def test_new_never_overwrites(tmp_path, capsys, existing):
    (tmp_path / existing).write_text("keep me\n")
    assert main(["keys", "new", "x", "--dir", str(tmp_path)]) == 1
    err = capsys.readouterr().err
    assert "exists" in err and "never overwritten" in err and err.count("\n") == 1
    assert (tmp_path / existing).read_text() == "keep me\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == [existing]


def test_bad_name_is_a_usage_error(tmp_path, capsys):
    assert main(["keys", "new", "../evil", "--dir", str(tmp_path)]) == 2
    assert "key name" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_show_prints_the_public_key_never_the_secret(tmp_path, capsys):
    pub_file, sec_file = zmq.auth.create_certificates(tmp_path, "r")
    os.chmod(sec_file, 0o600)
    public, secret = zmq.auth.load_certificate(sec_file)
    for f in (pub_file, sec_file):
        assert main(["keys", "show", f]) == 0
        cap = capsys.readouterr()
        assert cap.out.strip() == public.decode()
        assert secret.decode() not in cap.out + cap.err
    os.chmod(sec_file, 0o644)
    assert main(["keys", "show", sec_file]) == 0
    assert "chmod 600" in capsys.readouterr().err
    assert main(["keys", "show", str(tmp_path / "missing.key")]) == 1
    assert "no such file" in capsys.readouterr().err
    (tmp_path / "junk").write_text("nothing here\n")
    assert main(["keys", "show", str(tmp_path / "junk")]) == 1
    assert "not a CURVE certificate" in capsys.readouterr().err


def test_live_and_synth_option_errors_are_one_line(tmp_path, capsys):
    main(["keys", "new", "m", "--dir", str(tmp_path)])
    capsys.readouterr()
    cases = [
        (["live", "tcp://127.0.0.1:5557", "--headless", "--curve-secret",
          str(tmp_path / "m.key_secret")], "needs --curve-server"),
        (["live", "tcp://127.0.0.1:5557", "--bind", "--headless", "--curve-secret",
          str(tmp_path / "m.key_secret"), "--curve-server", str(tmp_path / "m.key")],
         "is for connecting"),
        (["live", "tcp://0.0.0.0:5557", "--bind", "--headless"], "--insecure-listen"),
        (["synth", "--endpoint", "tcp://0.0.0.0:5557", "--duration", "0.1"],
         "--insecure-listen"),
        (["synth", "--curve-secret", str(tmp_path / "m.key"), "--curve-allow",
          str(tmp_path), "--duration", "0.1"], "only a public key"),
        (["synth", "--iq", "--curve-secret", str(tmp_path / "m.key_secret"), "--curve-allow",
          str(tmp_path), "--duration", "0.1"], "do not apply to --iq"),
        (["live", "--iq", "tcp://127.0.0.1:5560", "--angle", "tcp://127.0.0.1:5561",
          "--headless", "--curve-secret", str(tmp_path / "m.key_secret"), "--curve-server",
          str(tmp_path / "m.key")], "do not apply to --iq"),
    ]
    for argv, match in cases:
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        assert match in err and err.count("\n") == 1, (argv, err)


def test_insecure_listen_warns_who_can_reach_it(capsys):
    assert main(["synth", "--endpoint", "tcp://0.0.0.0:*", "--insecure-listen",
                 "--duration", "0.05", "--rate-sps", "100"]) == 0
    err = capsys.readouterr().err
    assert "warning" in err and "every interface" in err and "anyone who can reach" in err


@pytest.mark.timeout(90)
def test_three_commands_of_the_readme(tmp_path):
    """`keys new`, `synth` with CURVE, `live` with CURVE (the README's Remote feeds), as
    separate processes; samples arrive (bounded wait)."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    lw = [sys.executable, "-m", "tui.cli"]
    keys = tmp_path / "keys"
    subprocess.run([*lw, "keys", "new", "radio", "monitor", "--dir", str(keys)], check=True,
                   env=env, capture_output=True, cwd=ROOT)
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        ep = f"tcp://127.0.0.1:{s.getsockname()[1]}"
    synth = subprocess.Popen([*lw, "synth", "--endpoint", ep, "--curve-secret",
                              str(keys / "radio.key_secret"), "--curve-allow", str(keys),
                              "--duration", "60", "--rate-sps", "2000"],
                             env=env, cwd=ROOT, stderr=subprocess.PIPE, text=True)
    live = None
    try:
        assert "publishing" in synth.stderr.readline()
        live = subprocess.Popen([*lw, "live", ep, "--headless", "--interval", "0.5",
                                 "--curve-secret", str(keys / "monitor.key_secret"),
                                 "--curve-server", str(keys / "radio.key")],
                                env=env, cwd=ROOT, stdout=subprocess.PIPE,
                                stderr=subprocess.DEVNULL, text=True)
        samples = 0
        deadline = time.monotonic() + 60
        while samples == 0 and time.monotonic() < deadline:
            line = live.stdout.readline()  # a metrics line every 0.5 s
            if not line:
                break
            rec = json.loads(line)
            if rec.get("type") == "metrics":
                samples = int(rec.get("samples") or 0)
        assert samples > 0
    finally:
        for proc in (live, synth):
            if proc is not None:
                proc.terminate()
                proc.wait(10)
