"""Validates MQTT payloads against the project's JSON Schemas (docs/mqtt/*.schema.json) with the
general-purpose `jsonschema` library (Draft 2020-12), as a peer from outside the daemon.

    check_mqtt_payloads.py SCHEMA_DIR MESSAGES

MESSAGES holds `mosquitto_sub -v` lines: `TOPIC PAYLOAD`. The schema is chosen by the topic's last level
(status, state, readings, events). Prints `TOPIC_KIND=COUNT …` and exits 0 when every payload is valid;
otherwise prints the first failure (topic, path in the payload, reason) and exits 1.
"""

import json
import sys
from pathlib import Path

from jsonschema import Draft202012Validator

KINDS = ("status", "state", "readings", "events")


def main() -> int:
    schema_dir, messages = Path(sys.argv[1]), Path(sys.argv[2])
    validators = {}
    for kind in KINDS:
        schema = json.loads((schema_dir / f"{kind}.schema.json").read_text(encoding="utf-8"))
        Draft202012Validator.check_schema(schema)
        validators[kind] = Draft202012Validator(schema)
    counts = dict.fromkeys(KINDS, 0)
    for number, line in enumerate(messages.read_text(encoding="utf-8").splitlines(), 1):
        if not line.strip():
            continue
        topic, _, payload = line.partition(" ")
        kind = topic.rsplit("/", 1)[-1]
        if kind not in validators:
            print(f"line {number}: topic {topic} has no schema", file=sys.stderr)
            return 1
        try:
            document = json.loads(payload)
        except json.JSONDecodeError as error:
            print(f"line {number}: {topic}: not JSON: {error}", file=sys.stderr)
            return 1
        errors = sorted(validators[kind].iter_errors(document), key=lambda e: list(e.path))
        if errors:
            e = errors[0]
            where = "/".join(str(p) for p in e.path) or "(top)"
            print(f"line {number}: {topic}: at {where}: {e.message}", file=sys.stderr)
            return 1
        counts[kind] += 1
    print(" ".join(f"{k}={v}" for k, v in counts.items()))
    return 0


if __name__ == "__main__":
    sys.exit(main())
