"""The ``[sweep]`` section: validation, expansion into points, identity by content, CLI errors.

No runs here (fast, < 2 s). References: ranges are ``numpy.linspace`` / ``numpy.geomspace``
(independent of kindyn); a product of lists has ``prod(len)`` points in row-major order and a zip
has the common length (common practice); a point's identity is the fingerprint of the case loaded
directly with the same ``--set`` overrides (kindyn.case, the path ``kindyn run --set`` takes).
"""

from __future__ import annotations

import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.cli import main
from kindyn.errors import CaseError
from kindyn.sweep.points import combinations, resolve_points, toml_literal
from kindyn.sweep.spec import validate_sweep

BASE = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = 4.0
[numerics]
planning = "estimate"
"""


def spec_of(raw):
    return validate_sweep(raw, "case.toml")


def test_absent_section_is_an_empty_spec_and_leaves_the_case_identity_alone(write_case):
    path = write_case(BASE)
    case = load_case(path)
    assert not case.sweep and case.sweep.as_dict() == {}
    # the [sweep] list does not enter a point's identity: extending the list keeps old points
    with_sweep = load_case(write_case(BASE + '[sweep]\n"magnetic.Rm" = [1, 2]\n', "b.toml"))
    assert with_sweep.fingerprint == case.fingerprint


def test_lists_and_ranges_expand_like_numpy():
    spec = spec_of({"magnetic.Rm": {"start": 2, "stop": 32, "count": 5, "spacing": "log"},
                    "flow.A": {"start": 0.5, "stop": 1.5, "count": 3}, "run.cfl": [0.5, 1.0]})
    np.testing.assert_allclose(spec.values[0], np.geomspace(2, 32, 5), rtol=1e-12)
    np.testing.assert_allclose(spec.values[1], np.linspace(0.5, 1.5, 3), rtol=1e-12)
    assert spec.values[0] == (2, 4, 8, 16, 32) and all(isinstance(v, int) for v in spec.values[0])
    assert "magnetic.Rm" in spec.log_spaced and spec.critical == "magnetic.Rm"
    points = combinations(spec)
    assert len(points) == 5 * 3 * 2
    assert points[1] == {"magnetic.Rm": 2, "flow.A": 0.5, "run.cfl": 1.0}  # last key fastest


def test_zip_walks_the_lists_side_by_side():
    spec = spec_of({"magnetic.Rm": [5, 10], "magnetic.seed": [1, 2], "combine": "zip"})
    assert combinations(spec) == [{"magnetic.Rm": 5, "magnetic.seed": 1}, {"magnetic.Rm": 10, "magnetic.seed": 2}]


@pytest.mark.parametrize("raw,key,expected", [
    ({"magnetic.Rn": [1, 2]}, 'sweep."magnetic.Rn"', "a key of [magnetic]"),
    ({"magnets.Rm": [1, 2]}, 'sweep."magnets.Rm"', "a key of a known section"),
    ({"magnetic.Rm": 5}, 'sweep."magnetic.Rm"', "a list of values"),
    ({"magnetic.Rm": []}, 'sweep."magnetic.Rm"', "non-empty"),
    ({"magnetic.Rm": [5, 5]}, 'sweep."magnetic.Rm"', "distinct values"),
    ({"magnetic.Rm": {"start": 1, "stop": 2}}, 'sweep."magnetic.Rm".count', "count"),
    ({"magnetic.Rm": {"start": -1, "stop": 2, "count": 3, "spacing": "log"}}, 'sweep."magnetic.Rm".start/stop',
     "positive ends"),
    ({"magnetic.Rm": {"start": 1, "stop": 2, "count": 3, "spacing": "cubic"}}, 'sweep."magnetic.Rm".spacing',
     '"linear"'),
    ({"magnetic.Rm": [1, 2], "combine": "outer"}, "sweep.combine", '"product"'),
    ({"magnetic.Rm": [1, 2], "method": "guess"}, "sweep.method", '"growth"'),
    ({"magnetic.Rm": [1, 2], "flow.A": [1], "combine": "zip"}, "sweep.combine", "equal length"),
    ({"magnetic.Rm": [1, 2], "critical": "flow.A"}, "sweep.critical", "one of the swept keys"),
    ({"magnetic.Rm": [1, 2], "refine_runs": 0}, "sweep.refine_runs", ">= 1"),
    ({"magnetic.Rm": [1, 2], "workers": 3}, "sweep.workers", "an option"),
    ({"refine": True}, "sweep", "at least one swept key"),
])
def test_bad_sweep_sections_name_file_key_and_expectation(raw, key, expected):
    with pytest.raises(CaseError) as info:
        spec_of(raw)
    assert info.value.file == "case.toml" and info.value.key == key
    assert expected in info.value.expected


def test_toml_literals_round_trip_through_the_override_parser():
    import tomllib

    for value in (3, 2.5e-07, 17.5, True, "abc", [16, 16, 32], [0.5, "pi"]):
        assert tomllib.loads(f"v = {toml_literal(value)}")["v"] == value


def test_identity_is_the_content_of_the_resolved_case_not_the_position(write_case):
    path = write_case(BASE)
    text = path.read_text()
    a = resolve_points(path, text, spec_of({"magnetic.Rm": [3, 5, 7]}))
    b = resolve_points(path, text, spec_of({"magnetic.Rm": [7, 5.0, 11]}))
    assert a[2].identity == b[0].identity and a[1].identity == b[1].identity  # 5 and 5.0: same case
    assert len({p.identity for p in a}) == 3
    direct = load_case(path, ["magnetic.Rm=7"])
    assert a[2].identity == direct.fingerprint


def test_an_invalid_point_is_kept_with_its_message(write_case):
    path = write_case(BASE)
    points = resolve_points(path, path.read_text(), spec_of({"magnetic.Rm": [3, -1]}))
    assert points[0].identity and points[1].identity is None
    assert "magnetic.Rm" in points[1].error and "positive" in points[1].error


@pytest.mark.parametrize("args,needle", [
    (["--workers", "0"], "--workers"),
    (["--workers", "100000"], "cores"),
    (["--threads-per-run", "0"], "--threads-per-run"),
    (["--grids", "16"], "two or more grids"),
    (["--set", 'magnetic.Rm=-3'], "magnetic.Rm"),
])
def test_bad_options_are_one_line_and_exit_2(write_case, tmp_path, capsys, args, needle):
    path = write_case(BASE + '[sweep]\n"magnetic.Rm" = [3, 5]\n')
    if needle == "magnetic.Rm":  # every point invalid: the sweep itself is wrong, nothing runs
        path = write_case(BASE + '[sweep]\n"magnetic.seed" = [1, 2]\n', "c.toml")
    code = main(["sweep", str(path), "--out", str(tmp_path / "out"), "--quiet", *args])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and needle in err[0] and "Traceback" not in err[0]
    assert not (tmp_path / "out").exists()


def test_a_case_without_sweep_section_is_refused(write_case, tmp_path, capsys):
    code = main(["sweep", str(write_case(BASE)), "--out", str(tmp_path), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "[sweep]" in err and "case.toml" in err
