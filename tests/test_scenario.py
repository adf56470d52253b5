"""Scenario validation: every bad input gets one line naming the key and what is allowed."""

import math
import re
from pathlib import Path

import pytest
from conftest import THREE_NUCLEI, pulsed_text

from dnpqc import ScenarioError, demo_scenario, load_scenario, parse_scenario
from dnpqc.physics.protocols import PulsedBlock, SpinLock

PULSED = pulsed_text().replace('sequence = "pulsepol"\n', "")  # the default sequence


def test_demo_and_examples_load():
    sc = demo_scenario()
    assert isinstance(sc.protocol, SpinLock)
    assert sc.system.num_nuclei == 4
    for path in sorted(Path(__file__).parent.parent.joinpath("examples").glob("*.toml")):
        load_scenario(path)


def test_defaults_and_single_point():
    sc = parse_scenario(PULSED)
    assert isinstance(sc.protocol, PulsedBlock)
    assert sc.sweep.parameter == "tau_s" and sc.sweep.values == (2.8e-6,)
    assert sc.cycles == 1 and sc.trotter.steps == 40 and sc.trotter.order == 1


def test_swept_key_may_be_left_out_of_drive():
    text = THREE_NUCLEI.replace("rabi_hz = 330e3\n", "")
    sc = parse_scenario(text)
    assert sc.protocol.rabi_hz == 315e3


def test_positions_give_hyperfine_and_dipolar_couplings():
    text = """
[spins]
field_t = 0.05
[[spins.nuclei]]
label = "P"
position_nm = [0.0, 0.3, 0.5]
[[spins.nuclei]]
label = "Q"
position_nm = [0.2, -0.3, 0.4]
[drive]
protocol = "spin-lock"
rabi_hz = 5e5
[cycle]
interaction_time_s = 1e-5
"""
    sc = parse_scenario(text)
    assert len(sc.system.couplings) == 1
    assert sc.system.nuclei[0].position_nm == (0.0, 0.3, 0.5)
    override = parse_scenario(text + '[[spins.couplings]]\npair = ["Q", "P"]\nd_hz = 12.5\n')
    assert override.system.couplings[0].d_hz == 12.5
    # the transverse coupling points at the position's azimuth: 90° for P, atan2(-0.3, 0.2) for Q
    assert sc.system.nuclei[0].azimuth_deg == pytest.approx(90.0)
    assert sc.system.nuclei[1].azimuth_deg == pytest.approx(math.degrees(math.atan2(-0.3, 0.2)))


def test_azimuth_of_a_nucleus_given_by_couplings():
    text = THREE_NUCLEI.replace("a_perp_hz = 8e3", "a_perp_hz = 8e3\nazimuth_deg = -30")
    nuclei = parse_scenario(text).system.nuclei
    assert [n.azimuth_deg for n in nuclei] == [0.0, -30.0, 0.0]


def test_lattice_cluster():
    text = PULSED.replace(
        '[[spins.nuclei]]\nlabel = "C1"\na_par_hz = 10e3\na_perp_hz = 10e3\n',
        "[spins.lattice]\nradius_nm = 1.5\nseed = 4\nmin_distance_nm = 0.4\nmax_nuclei = 3\n",
    )
    sc = parse_scenario(text)
    assert sc.system.labels == ("L1", "L2", "L3")
    assert all(n.position_nm is not None for n in sc.system.nuclei)


def _edit(text, old, new):
    assert old in text
    return text.replace(old, new)


BAD = [
    ("unknown top key", lambda t: t + "[extra]\nx = 1\n", "unknown key `extra` at the top level"),
    (
        "unknown drive key",
        lambda t: _edit(t, "detuning_hz = 3e3", "detune = 3e3"),
        "unknown key `detune` in `drive`",
    ),
    ("missing field", lambda t: _edit(t, "field_t = 0.03\n", ""), "missing key `spins.field_t`"),
    (
        "wrong type",
        lambda t: _edit(t, "field_t = 0.03", 'field_t = "high"'),
        "`spins.field_t` must be a number",
    ),
    (
        "negative time",
        lambda t: _edit(t, "interaction_time_s = 12e-6", "interaction_time_s = -1e-6"),
        "`cycle.interaction_time_s` must be > 0",
    ),
    ("zero points", lambda t: _edit(t, "points = 4", "points = 0"), "`sweep.points` must be >= 1"),
    (
        "both hf and position",
        lambda t: _edit(t, "a_perp_hz = 12e3", "a_perp_hz = 12e3\nposition_nm = [0, 0, 1]"),
        "has both of `a_par_hz`\\+`a_perp_hz` and `position_nm`",
    ),
    (
        "azimuth with a position",
        lambda t: _edit(
            t,
            "a_par_hz = 25e3\na_perp_hz = 12e3\n",
            "position_nm = [0, 0.4, 0.5]\nazimuth_deg = 10\n",
        ),
        "`spins.nuclei\\[0\\].azimuth_deg` \\('A'\\) goes with",
    ),
    (
        "azimuth not a number",
        lambda t: _edit(t, "a_perp_hz = 12e3", 'a_perp_hz = 12e3\nazimuth_deg = "north"'),
        "azimuth_deg` must be a number",
    ),
    (
        "neither hf nor position",
        lambda t: _edit(t, "a_par_hz = 25e3\na_perp_hz = 12e3\n", ""),
        "has neither of",
    ),
    (
        "unknown coupling label",
        lambda t: _edit(t, 'pair = ["A", "C"]', 'pair = ["A", "Z"]'),
        "names unknown nucleus 'Z'",
    ),
    (
        "self coupling",
        lambda t: _edit(t, 'pair = ["A", "C"]', 'pair = ["A", "A"]'),
        "two different nuclei",
    ),
    (
        "bad protocol",
        lambda t: _edit(t, 'protocol = "spin-lock"', 'protocol = "cw"'),
        "`drive.protocol` must be one of spin-lock, pulsed",
    ),
    (
        "bad sweep parameter",
        lambda t: _edit(t, 'parameter = "rabi_hz"', 'parameter = "tau_s"'),
        "`sweep.parameter` must be one of rabi_hz, detuning_hz, interaction_time_s",
    ),
    ("bad order", lambda t: _edit(t, "order = 2", "order = 3"), "`trotter.order` must be 1 or 2"),
    (
        "bool as number",
        lambda t: _edit(t, "steps = 30", "steps = true"),
        "`trotter.steps` must be an integer",
    ),
    ("duplicate label", lambda t: _edit(t, 'label = "B"', 'label = "A"'), "'A' repeats"),
    (
        "one point range",
        lambda t: _edit(t, "points = 4", "points = 1"),
        "needs `sweep.start` == `sweep.stop`",
    ),
    (
        "negative swept rabi",
        lambda t: _edit(t, "start = 315e3", "start = -1e3"),
        "swept `rabi_hz` must be >= 0",
    ),
    ("not toml", lambda t: t + "[[[", "not valid TOML"),
    ("infinite", lambda t: _edit(t, "d_hz = 900.0", "d_hz = inf"), "must be finite"),
]


@pytest.mark.parametrize(("name", "edit", "match"), BAD, ids=[b[0] for b in BAD])
def test_bad_input_is_one_clear_line(name, edit, match):
    with pytest.raises(ScenarioError, match=match) as info:
        parse_scenario(edit(THREE_NUCLEI))
    assert "\n" not in str(info.value)


PULSED_BAD = [
    (
        "spin-lock key in pulsed",
        lambda t: _edit(t, "[cycle]", "rabi_hz = 1e6\n[cycle]"),
        "unknown key `rabi_hz` in `drive`",
    ),
    ("missing blocks", lambda t: _edit(t, "blocks = 4\n", ""), "missing key `cycle.blocks`"),
    (
        "block without custom",
        lambda t: t.replace("[cycle]", "[[drive.block]]\nwait = 1.0\n[cycle]"),
        'needs `drive.sequence = "custom"`',
    ),
    (
        "custom without pulses",
        lambda t: _edit(
            t,
            'protocol = "pulsed"',
            'protocol = "pulsed"\nsequence = "custom"\nblock = [{wait = 1.0}]',
        ),
        "at least one pulse",
    ),
    (
        "pulse without axis",
        lambda t: _edit(
            t,
            'protocol = "pulsed"',
            'protocol = "pulsed"\nsequence = "custom"\nblock = [{angle_deg = 90.0}, {wait = 1.0}]',
        ),
        "exactly one of `axis`",
    ),
    (
        "bad axis",
        lambda t: _edit(
            t,
            'protocol = "pulsed"',
            'protocol = "pulsed"\nsequence = "custom"\n'
            'block = [{angle_deg = 90.0, axis = "z"}, {wait = 1.0}]',
        ),
        "`drive.block\\[0\\].axis` must be one of x, y, -x, -y",
    ),
    (
        "waits not summing to one",
        lambda t: _edit(
            t,
            'protocol = "pulsed"',
            'protocol = "pulsed"\nsequence = "custom"\n'
            'block = [{angle_deg = 90.0, axis = "x"}, {wait = 0.5}, {wait = 0.25}]',
        ),
        "waits are fractions of the block length `drive.tau_s` and must sum to 1, got 0.75",
    ),
    (
        "pulses longer than tau",
        lambda t: _edit(t, "[cycle]", "pulse_rabi_hz = 1e5\n[cycle]"),
        "too short for finite pulses",
    ),
    (
        "unknown sequence",
        lambda t: _edit(t, 'protocol = "pulsed"', 'protocol = "pulsed"\nsequence = "xy8"'),
        "`drive.sequence` must be one of pulsepol, custom",
    ),
]


@pytest.mark.parametrize(("name", "edit", "match"), PULSED_BAD, ids=[b[0] for b in PULSED_BAD])
def test_bad_pulsed_input(name, edit, match):
    with pytest.raises(ScenarioError, match=match) as info:
        parse_scenario(edit(PULSED))
    assert "\n" not in str(info.value)


def test_custom_block_with_phase_in_degrees():
    text = _edit(
        PULSED,
        'protocol = "pulsed"',
        'protocol = "pulsed"\nsequence = "custom"\n'
        "block = [{angle_deg = 180.0, phase_deg = 45.0}, {wait = 0.5}, "
        '{angle_deg = 180.0, axis = "-y"}, {wait = 0.5}]',
    )
    sc = parse_scenario(text)
    assert sc.protocol.elements[0].phase_rad == pytest.approx(math.pi / 4)
    assert sc.protocol.elements[2].phase_rad == pytest.approx(3 * math.pi / 2)


def test_missing_file_is_a_scenario_error(tmp_path):
    with pytest.raises(ScenarioError, match=re.escape("cannot read scenario file")):
        load_scenario(tmp_path / "nope.toml")
