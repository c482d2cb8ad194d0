"""``lobewatch synth --array ...``: several simulated arrays, each on its own port.

Every ``--array ENDPOINT[,KEY=VALUE...]`` publishes one simulated array (the other synth
options are the defaults; KEY overrides them for that array) from its own thread, so
one command feeds a multi-stream ``lobewatch live`` for trying the fleet features.
All arrays and scenarios are invented for testing.
"""

from __future__ import annotations

import argparse
import sys
import threading
from dataclasses import replace
from typing import Any

from stream.scenarios import SCENARIOS
from stream.synth import SYNTH_FORMATS, SynthConfig, run_publisher
from tui.cli import UsageError

#: ``--array`` keys -> (SynthConfig field, converter).
ARRAY_KEYS: dict[str, tuple[str, Any]] = {
    "scenario": ("scenario", str),
    "seed": ("seed", int),
    "topic": ("topic", lambda v: v.encode()),
    "elements": ("n_elements", int),
    "rate-sps": ("rate_sps", float),
    "format": ("fmt", str),
    "power-dbm": ("power_offset_dbm", float),
    "noise-db": ("noise_db", float),
}


def add_array_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--array", action="append", dest="arrays", metavar="ENDPOINT[,KEY=VALUE...]",
        help="publish one more simulated array on ENDPOINT; repeat for several.  KEYs "
             f"({', '.join(ARRAY_KEYS)}) override this command's options for that array, "
             "e.g. --array tcp://127.0.0.1:5601,scenario=mast-sway "
             "--array tcp://127.0.0.1:5602,scenario=dead-column (each gets seed + its "
             "position unless seed= is given)")


def parse_array(text: str, base: SynthConfig, index: int) -> tuple[str, SynthConfig]:
    """One ``--array`` value -> (endpoint, config); one-line errors."""
    endpoint, *pairs = [p.strip() for p in text.split(",")]
    if not endpoint.startswith(("tcp://", "ipc://", "inproc://")):
        raise UsageError(f"--array {text!r}: start with a ZeroMQ address, e.g. "
                         "tcp://127.0.0.1:5601")
    kw: dict[str, Any] = {"seed": base.seed + index}
    for pair in pairs:
        key, sep, value = pair.partition("=")
        if not sep or key not in ARRAY_KEYS:
            raise UsageError(f"--array {text!r}: {pair!r} is not KEY=VALUE with KEY one of "
                             f"{', '.join(ARRAY_KEYS)}")
        field_name, conv = ARRAY_KEYS[key]
        try:
            kw[field_name] = conv(value)
        except ValueError:
            raise UsageError(f"--array {text!r}: {key}={value!r} is not a valid value") from None
    if kw.get("scenario", base.scenario) not in SCENARIOS:
        raise UsageError(f"--array {text!r}: unknown scenario; choose from "
                         f"{', '.join(SCENARIOS)}")
    if kw.get("fmt", base.fmt) not in SYNTH_FORMATS:
        raise UsageError(f"--array {text!r}: unknown format; choose from "
                         f"{', '.join(SYNTH_FORMATS)}")
    try:
        return endpoint, replace(base, **kw).validate()
    except ValueError as exc:
        raise UsageError(f"--array {text!r}: {exc}") from None


def run_arrays(args: argparse.Namespace, base: SynthConfig, stop: threading.Event,
               **publisher_kw: Any) -> int:
    """Publish every ``--array`` until ``stop`` (or ``--duration``); returns messages sent.
    ``publisher_kw`` goes to every :func:`stream.synth.run_publisher` (e.g. ``curve``).
    A failure in one publisher stops them all and is raised here."""
    arrays = [parse_array(t, base, i) for i, t in enumerate(args.arrays)]
    sent = [0] * len(arrays)
    errors: list[BaseException] = []

    def ready(addr: str, cfg: SynthConfig) -> None:
        topic = f", topic {cfg.topic.decode()}" if cfg.topic else ""
        print(f"lobewatch synth: publishing {cfg.fmt} at {cfg.rate_sps:g} samples/s on "
              f"{addr} (scenario {cfg.scenario}, seed {cfg.seed}{topic})",
              file=sys.stderr, flush=True)

    def publish(i: int, endpoint: str, cfg: SynthConfig) -> None:
        try:
            sent[i] = run_publisher(endpoint, cfg, stop, duration_s=args.duration,
                                    on_ready=lambda addr: ready(addr, cfg), **publisher_kw)
        except BaseException as exc:  # noqa: BLE001 - reported in the main thread
            errors.append(exc)
            stop.set()

    threads = [threading.Thread(target=publish, args=(i, ep, cfg), daemon=True,
                                name=f"lobewatch-synth-{i}")
               for i, (ep, cfg) in enumerate(arrays)]
    for t in threads:
        t.start()
    while any(t.is_alive() for t in threads):
        for t in threads:
            t.join(timeout=0.1)
    if errors:
        raise errors[0]
    return sum(sent)
