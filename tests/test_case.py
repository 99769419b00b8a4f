from pathlib import Path

import pytest

from fusion.errors import InputFileError
from fusion.io.case import load_case, parse_case

TINY = Path(__file__).parent / "data" / "tiny.toml"
CASES = sorted((Path(__file__).parent.parent / "cases").glob("*.toml"))


def test_all_shipped_cases_are_valid():
    from fusion.place_cases.case import is_place_case, load_place_case

    assert len(CASES) >= 5
    for path in CASES:
        if is_place_case(path):
            case = load_place_case(path)
            assert case.sensors and len(case.route.path) >= 2
            continue
        case = load_case(path)
        assert case.sensors and case.route.waypoints


def _broken(text_from: str, text_to: str) -> str:
    text = TINY.read_text()
    assert text_from in text
    return text.replace(text_from, text_to, 1)


def _line_of(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), start=1) if needle in line)


@pytest.mark.parametrize(
    "old, new, field, message, marker",
    [
        ("width_m = 10.0", 'width_m = "ten"', "site.width_m", "must be a number", "width_m"),
        ('kind = "ranging"', 'kind = "sonar"', "sensors[1].kind", "unknown value 'sonar'; choose one of", "sonar"),
        (
            "x_m = 0.75",
            "x_m = 40.0",
            "site.doors[0]",
            "door 'bay door' at (40.0 m, 3.0 m) is off the map",
            "[[site.doors]]",
        ),
        (
            "[8.5, 4.5], [1.5, 4.5]]",
            "[8.5, 4.5], [1.5, 4.5], [5.0, 1.0], [5.0, 5.0]]",
            "route.waypoints",
            "route leg 5 from (5.0, 1.0) to (5.0, 5.0) passes through a wall or rack",
            "waypoints",
        ),
        (
            "wall_spread_m = 0.15",
            "wall_spread_m = 0.15\nwall_spread = 0.2",
            "sensors[1].wall_spread",
            "unknown field",
            "wall_spread =",
        ),
        ('door = "bay door"', 'door = "dock door"', "sensors[3].door", "no door 'dock door'", "dock door"),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\n[run.policy]\nquarantine_alpha = 5.0",
            "run.policy.quarantine_alpha",
            "must be at most 1",
            "quarantine_alpha",
        ),
        (
            "tick_s = 0.25",
            'tick_s = 0.25\nmotion = "teleport"',
            "run.motion",
            "unknown value 'teleport'; choose one of: probabilistic, bounded",
            "teleport",
        ),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\n[run.particles]\nmin_particles = 0",
            "run.particles.min_particles",
            "must be a whole number at least 1",
            "min_particles",
        ),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\nbudget_gib = 2.0\n[run.particles]\nmax_particles = 40000000",
            "run.particles.max_particles",
            "beyond the case's memory budget of 2 GiB",
            "max_particles",
        ),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\n[run.particles]\nmin_particles = 500\nmax_particles = 400",
            "run.particles.max_particles",
            "must be at least min_particles (500)",
            "max_particles",
        ),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\n[run.gaussian]\ngate_probability = 1.5",
            "run.gaussian.gate_probability",
            "at most 1",
            "gate_probability",
        ),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\n[run.gaussian]\ngate = 0.9",
            "run.gaussian.gate",
            "unknown field 'gate'",
            "gate =",
        ),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\nstart_covariance = [[0.04, 0.05, 0.0], [0.05, 0.04, 0.0], [0.0, 0.0, 25.0]]",
            "run.start_covariance",
            "is not positive definite",
            "start_covariance",
        ),
        (
            "tick_s = 0.25",
            "tick_s = 0.25\nstart_covariance = [[0.04, 0.0], [0.0, 0.04]]",
            "run.start_covariance",
            "must be a 3 × 3 array",
            "start_covariance",
        ),
        (
            'kind = "odometry"',
            'kind = "odometry"\nfloor_m = 0.01',
            "sensors[0].floor_m",
            "no longer read: odometry noise is now per metre travelled",
            "floor_m",
        ),
    ],
)
def test_malformed_cases_name_file_line_and_field(old, new, field, message, marker):
    text = _broken(old, new)
    with pytest.raises(InputFileError) as info:
        parse_case(text, "bay.toml")
    err = info.value
    assert err.path == "bay.toml" and err.field == field, str(err)
    assert message in err.problem, str(err)
    assert err.line == _line_of(text, marker), str(err)
    assert str(err).startswith(f"bay.toml, line {err.line}: {field}: ")


@pytest.mark.parametrize(
    "old, new",
    [
        ("sigma_hit_m", "wall_spread_m"),
        ("z_hit", "wall_share"),
        ("z_short", "early_share"),
        ("z_max", "no_echo_share"),
        ("z_rand", "stray_share"),
        ("lambda_short", "early_decay_per_m"),
    ],
)
def test_old_range_model_names_are_refused_with_their_new_name(old, new):
    # The beam model's parameters are named in our own words; a case file written with the older names
    # must not be read silently with defaults (the values would be lost), and the error says what to write.
    text = _broken("wall_spread_m = 0.15", f"wall_spread_m = 0.15\n{old} = 0.1")
    with pytest.raises(InputFileError) as info:
        parse_case(text, "old.toml")
    assert info.value.field == f"sensors[1].{old}" and info.value.line == _line_of(text, f"{old} =")
    assert f"now called '{new}'" in info.value.problem


def test_missing_fields_and_bad_toml():
    with pytest.raises(InputFileError, match="the field 'speed_mps'|needs at least two"):
        parse_case(_broken("waypoints = [[1.5, 1.5], [8.5, 1.5], [8.5, 4.5], [1.5, 4.5]]", "waypoints = []"), "x.toml")
    with pytest.raises(InputFileError, match=r"line 2: not valid TOML"):
        parse_case('[case]\nname = "unterminated\n', "y.toml")
    # A case without [route] is a replay-only site: it loads, and only simulating refuses it.
    replay_only = parse_case(TINY.read_text().split("[route]")[0], "z.toml")
    assert replay_only.route is None
    with pytest.raises(InputFileError, match="z.toml: route: the case has no \\[route\\]"):
        replay_only.require_route()
    with pytest.raises(InputFileError, match="cannot read the case file"):
        load_case("/nonexistent/case.toml")
