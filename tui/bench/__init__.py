"""The measurements behind ``lobewatch bench``: ingest, latency, metrics, redraw,
replay and memory, each a ratio or a median measured in the same run."""
