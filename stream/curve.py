"""CURVE authentication and encryption for the ZeroMQ sockets, using ``zmq.auth``.

ZeroMQ has the mechanism built in (CurveZMQ, RFC 26; ZAP, RFC 27, both at
rfc.zeromq.org), and pyzmq ships the certificate files and the ZAP handler
(``zmq.auth``), so nothing here is cryptography of our own: this module only loads the
certificate files, sets the socket options, runs pyzmq's authenticator with the
allow-list directory and turns ZeroMQ's handshake-failure monitor events into a count.

Roles (the side that binds is usually the CURVE server, but CURVE does not care who
binds; we follow the usual arrangement):

==========================  ==========================  ===============================
our socket                  options                     who is allowed in
==========================  ==========================  ===============================
connects (client)           ``secret`` + ``server_key`` the peer must hold the secret of
                                                        ``server_key``; it learns ours
binds (server)              ``secret`` + ``allow_dir``  peers whose public key has a
                                                        ``*.key`` file in ``allow_dir``
==========================  ==========================  ===============================

The authenticator is ``zmq.auth.thread.ThreadAuthenticator``: it serves ZAP requests on
the socket's own context from a thread of its own, so it works whether or not an event
loop is running when the socket is made (the subscriber is created before the loop
starts, the publisher has no loop) and answers even while the loop is busy draining.
"""

from __future__ import annotations

import os
import stat
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import zmq
import zmq.auth
from zmq.auth.thread import ThreadAuthenticator

from stream.errors import UserError

#: Socket-monitor events of a failed security handshake (libzmq 4.3, zmq_socket_monitor).
HANDSHAKE_FAILED_EVENTS: int = (zmq.EVENT_HANDSHAKE_FAILED_NO_DETAIL
                                | zmq.EVENT_HANDSHAKE_FAILED_PROTOCOL
                                | zmq.EVENT_HANDSHAKE_FAILED_AUTH)
#: The ``SourceStats.rejected`` reason under which handshake failures are counted.
AUTH_FAILED: str = "auth_failed"
#: Keys of a stream table that :func:`curve_from_mapping` reads.
MAPPING_KEYS: tuple[str, ...] = ("curve_secret", "curve_server", "curve_allow")


def secret_file_warning(path: str | os.PathLike[str]) -> str | None:
    """A warning line when a secret certificate can be read by group or others.

    Common practice for private keys (as ssh does for its identity files): mode 0600.
    """
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return None
    if mode & (stat.S_IRWXG | stat.S_IRWXO):
        return (f"warning: secret key file {os.fspath(path)} can be read by other users "
                f"(mode {stat.S_IMODE(mode):04o}); run `chmod 600 {os.fspath(path)}`")
    return None


def _load(path: Path, what: str, option: str) -> tuple[bytes, bytes | None]:
    if not path.is_file():
        raise UserError(f"{option} {path}: no such file; make a key pair with "
                        "`lobewatch keys new NAME`")
    try:
        return zmq.auth.load_certificate(path)
    except (OSError, ValueError) as exc:
        raise UserError(f"{option} {path}: not a CURVE certificate ({exc}); give the "
                        f"{what} written by `lobewatch keys new`") from None


@dataclass(frozen=True)
class CurveConfig:
    """Our key pair plus either the server's public key (we connect) or the directory of
    allowed peers' public certificates (we bind).  Build it with :meth:`load`.

    ``warnings`` holds lines for the user (a readable secret file, an empty allow list).
    """

    public_key: bytes
    secret_key: bytes = field(repr=False)
    secret_path: Path
    server_key: bytes | None = None
    server_path: Path | None = None
    allow_dir: Path | None = None
    allowed_keys: int = 0
    warnings: tuple[str, ...] = ()

    @classmethod
    def load(cls, secret: str | os.PathLike[str], *,
             server: str | os.PathLike[str] | None = None,
             allow: str | os.PathLike[str] | None = None) -> CurveConfig:
        """Read the certificate files; one-line :class:`UserError` on bad input."""
        if (server is None) == (allow is None):
            raise UserError("--curve-secret needs exactly one of --curve-server FILE (when "
                            "connecting to a publisher) or --curve-allow DIR (when binding)")
        secret_path = Path(secret)
        pub, sec = _load(secret_path, "NAME.key_secret file", "--curve-secret")
        if sec is None:
            raise UserError(f"--curve-secret {secret_path}: holds only a public key; give "
                            "the .key_secret file, not the .key file")
        notes = [w for w in (secret_file_warning(secret_path),) if w]
        server_key = server_path = allow_dir = None
        n_allowed = 0
        if server is not None:
            server_path = Path(server)
            server_key, _ = _load(server_path, "publisher's NAME.key file", "--curve-server")
        else:
            allow_dir = Path(allow)  # type: ignore[arg-type]
            if not allow_dir.is_dir():
                raise UserError(f"--curve-allow {allow_dir}: not a directory; put the "
                                "allowed peers' public .key files in one")
            try:
                n_allowed = len(zmq.auth.load_certificates(allow_dir))
            except (OSError, ValueError) as exc:
                raise UserError(f"--curve-allow {allow_dir}: cannot read the certificates "
                                f"({exc})") from None
            if n_allowed == 0:
                notes.append(f"warning: --curve-allow {allow_dir} holds no .key files, so "
                             "no peer can connect; copy the peers' public .key files there")
        return cls(public_key=pub, secret_key=sec, secret_path=secret_path,
                   server_key=server_key, server_path=server_path, allow_dir=allow_dir,
                   allowed_keys=n_allowed, warnings=tuple(notes))

    @property
    def is_server(self) -> bool:
        """True when this side checks peers against the allow list."""
        return self.allow_dir is not None

    def apply(self, sock: zmq.Socket) -> None:
        """Set the CURVE options on ``sock``; call before ``bind``/``connect``."""
        sock.curve_secretkey = self.secret_key
        sock.curve_publickey = self.public_key
        if self.is_server:
            sock.curve_server = True
        else:
            sock.curve_serverkey = self.server_key


class CurveGuard:
    """CURVE on the sockets of one context: options per socket, and for a server the
    ZAP authenticator that enforces the allow list.  Stop it before ``ctx.term()``."""

    def __init__(self, config: CurveConfig, context: zmq.Context) -> None:
        self.config = config
        self._auth: ThreadAuthenticator | None = None
        if config.is_server:
            auth = ThreadAuthenticator(context)
            auth.start()
            auth.configure_curve(domain="*", location=str(config.allow_dir))
            self._auth = auth

    def apply(self, sock: zmq.Socket) -> None:
        """Set the CURVE options on a new socket of this context."""
        self.config.apply(sock)

    def close(self) -> None:
        """Stop the authenticator (idempotent)."""
        if self._auth is not None:
            self._auth.stop()
            self._auth = None


def curve_from_mapping(table: Mapping[str, Any], *, where: str = "stream table",
                       base_dir: str | os.PathLike[str] | None = None) -> CurveConfig | None:
    """A :class:`CurveConfig` from a TOML stream table's ``curve_secret`` and
    ``curve_server`` or ``curve_allow`` keys, or ``None`` when none is given.

    Relative paths are taken from ``base_dir`` (the TOML file's folder) when given.
    """
    got = {k: table.get(k) for k in MAPPING_KEYS if table.get(k) is not None}
    if not got:
        return None
    for k, v in got.items():
        if not isinstance(v, str) or not v:
            raise UserError(f"{where}: {k} must be a file or folder name (a string)")
    if "curve_secret" not in got:
        raise UserError(f"{where}: curve_server / curve_allow need curve_secret (our own "
                        ".key_secret file)")

    def path(v: str | None) -> str | None:
        if v is None:
            return None
        p = Path(v).expanduser()
        return str(p if p.is_absolute() or base_dir is None else Path(base_dir) / p)

    try:
        return CurveConfig.load(path(got["curve_secret"]),  # type: ignore[arg-type]
                                server=path(got.get("curve_server")),
                                allow=path(got.get("curve_allow")))
    except UserError as exc:
        msg = str(exc)
        for k in MAPPING_KEYS:
            msg = msg.replace(f"--{k.replace('_', '-')}", k)
        raise UserError(f"{where}: {msg}") from None
