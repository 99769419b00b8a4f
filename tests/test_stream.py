import io
import json
from pathlib import Path

from fusion.io.case import load_case
from fusion.localizer import Localizer
from fusion.simulate import simulate
from fusion.stream import MAX_LINE_BYTES, stream

TINY = Path(__file__).parent / "data" / "tiny.toml"


def test_stream_writes_a_decision_per_line_and_survives_bad_lines():
    case = load_case(TINY)
    loc = Localizer.from_case(case, "bayes")
    lines = [json.dumps(o.to_record()) for t in simulate(case)[:8] for o in t.observations]
    good = len(lines)
    lines[3:3] = [
        "{not json",
        json.dumps({"t": 0.5, "sensor": "sonar", "kind": "ranging", "ranges_m": [1.0]}),
        json.dumps({"t": 0.5, "sensor": "ranger", "kind": "ranging", "ranges_m": [1.0, "x", 2.0]}),
        "x" * (MAX_LINE_BYTES + 10),
    ]
    source = io.BytesIO(("\n".join(lines) + "\n").encode())
    out, err = io.StringIO(), io.StringIO()
    written, rejected = stream(loc, source, out, err)
    records = [json.loads(line) for line in out.getvalue().splitlines()]
    assert rejected == 4 and written == good
    errors = [r for r in records if "error" in r]
    assert [r["line"] for r in errors] == [4, 5, 6, 7]
    assert "not JSON" in errors[0]["error"] and "unknown sensor 'sonar'" in errors[1]["error"]
    assert "ranges_m[1]" in errors[2]["error"] and "longer than" in errors[3]["error"]
    assert "line 4" in err.getvalue()


def test_a_stream_that_stops_mid_line_is_reported():
    case = load_case(TINY)
    loc = Localizer.from_case(case, "evidential")
    out, err = io.StringIO(), io.StringIO()
    written, rejected = stream(loc, io.BytesIO(b'{"t": 0.0, "sensor": "wheels", "kind": "odo'), out, err)
    assert written == 0 and rejected == 1
    assert "stopped in the middle of a line" in out.getvalue()
