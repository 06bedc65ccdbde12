"""Parses a Prometheus text exposition read from standard input with the
official Python client's parser (prometheus_client.parser), and prints
the families as JSON: {name: {"type": ..., "samples": [[name, labels, value], ...]}}.

Used by tests/daemon_python.rs: the daemon's /metrics must be what the
reference parser accepts.
"""
import json
import math
import sys

from prometheus_client.parser import text_string_to_metric_families


def main():
    text = sys.stdin.read()
    out = {}
    for fam in text_string_to_metric_families(text):
        samples = []
        for s in fam.samples:
            v = s.value
            samples.append([s.name, dict(s.labels), None if math.isnan(v) else v])
        out[fam.name] = {"type": fam.type, "samples": samples}
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
