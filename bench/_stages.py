"""Stage timings of a basinkit command from its ``--log-json`` records (the output folder
holds no timings: they differ from run to run and the files must not)."""

import json


def stage_seconds(log_text: str) -> dict:
    """``{stage: seconds}`` from the ``stage_done`` records of ``--log-json`` output."""
    out = {}
    for line in log_text.splitlines():
        try:
            rec = json.loads(line)
        except ValueError:
            continue
        if isinstance(rec, dict) and rec.get("event") == "stage_done":
            out[rec["stage"]] = float(rec["seconds"])
    return out
