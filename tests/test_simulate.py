import math
from pathlib import Path

from fusion.io.case import load_case
from fusion.io.observations import from_record
from fusion.simulate import simulate

TINY = Path(__file__).parent / "data" / "tiny.toml"


def test_simulation_is_reproducible_and_follows_the_route():
    case = load_case(TINY)
    a, b = simulate(case), simulate(case)
    assert [t.truth for t in a] == [t.truth for t in b]
    assert [o.to_record() for t in a for o in t.observations] == [o.to_record() for t in b for o in t.observations]
    end = a[-1].truth
    assert math.hypot(end.x_m - 1.5, end.y_m - 4.5) < 0.3
    other = simulate(case, seed=case.run.seed + 1)
    assert [o.to_record() for o in other[5].observations] != [o.to_record() for o in a[5].observations]


def test_log_records_round_trip():
    case = load_case(TINY)
    for tick in simulate(case)[:20]:
        for obs in tick.observations:
            again = from_record(obs.to_record())
            assert again.to_record() == obs.to_record()


def test_odometry_integrates_to_the_true_path_length():
    case = load_case(TINY)
    ticks = simulate(case)
    travelled = sum(o.reading.forward_m for t in ticks for o in t.observations if o.kind == "odometry")
    route = 7.0 + 3.0 + 7.0
    assert abs(travelled - route) < 0.05 * route  # odometry noise is a few percent per metre
