"""What to tell a user whose stream sits at ``waiting``: what was tried, and the usual
reasons nothing arrives.  Pure text from the source's settings; the live driver
emits it once as a ``status`` event after :data:`HINT_AFTER_S` without a message,
headless prints it as a status line and the screen can show it."""

from __future__ import annotations

from typing import Any

#: Seconds at ``waiting`` with no message at all before the hint is given.
HINT_AFTER_S: float = 5.0


def source_settings(source: Any) -> tuple[str | None, bool, bytes | str | None]:
    """``(endpoint, bind, topic)`` of a ZeroMQ source, looking through wrappers that
    keep the wrapped source in ``.source``; ``(None, False, None)`` when unknown."""
    seen = 0
    while source is not None and seen < 5:
        endpoint = getattr(source, "endpoint", None)
        if endpoint and hasattr(source, "bind"):
            return str(endpoint), bool(source.bind), getattr(source, "topic", None)
        source = getattr(source, "source", None)
        seen += 1
    return None, False, None


def waiting_hint(endpoint: str | None, bind: bool, topic: bytes | str | None,
                 waited_s: float) -> str:
    """One paragraph: what was tried for how long, then the usual causes, each with
    what to check."""
    if isinstance(topic, bytes):
        topic = topic.decode("utf-8", "replace")
    where = endpoint or "the source"
    how = "listening (bound) on" if bind else "connected to"
    topic_text = f"topic prefix {topic!r}" if topic else "every topic (no prefix)"
    causes = []
    if bind:
        causes += ["the publisher is not running, or connects to another address",
                   "the publisher binds too: exactly one side binds (drop --bind here "
                   "if the publisher binds)"]
    else:
        causes += ["nothing is bound there: start the publisher, or check it runs on "
                   "that host",
                   "wrong host or port: compare with the address the publisher binds",
                   "the publisher connects too: exactly one side binds (add --bind here "
                   "if the publisher connects)"]
    causes.append(f"topic mismatch: the publisher's topic must start with {topic!r}"
                  if topic else "topic mismatch: none here, so not the cause")
    causes.append("a firewall between the two hosts (TCP)")
    return (f"no messages after {waited_s:.0f} s {how} {where}, {topic_text}. Usual "
            "causes: " + "; ".join(causes) + ".")
