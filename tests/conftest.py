"""Shared fixtures: small scenarios written as TOML text, as a user would."""

import pytest

from dnpqc import parse_scenario

ONE_NUCLEUS = """
[spins]
field_t = {field_t}
[[spins.nuclei]]
label = "C1"
a_par_hz = {a_par}
a_perp_hz = {a_perp}
[drive]
protocol = "spin-lock"
rabi_hz = {rabi}
[cycle]
interaction_time_s = {time_s}
count = {count}
[trotter]
steps = {steps}
order = {order}
"""


def one_nucleus(
    *,
    field_t=0.05,
    a_par=20e3,
    a_perp=20e3,
    rabi=500e3,
    time_s=20e-6,
    count=1,
    steps=40,
    order=2,
    sweep="",
):
    """A one-nucleus spin-lock scenario; `sweep` is extra TOML appended verbatim."""
    text = ONE_NUCLEUS.format(
        field_t=field_t,
        a_par=a_par,
        a_perp=a_perp,
        rabi=rabi,
        time_s=time_s,
        count=count,
        steps=steps,
        order=order,
    )
    return parse_scenario(text + sweep)


PULSED = """
[spins]
field_t = 0.05
[[spins.nuclei]]
label = "C1"
a_par_hz = 10e3
a_perp_hz = 10e3
[drive]
protocol = "pulsed"
sequence = "pulsepol"
tau_s = {tau}
{extra}
[cycle]
blocks = {blocks}
count = {count}
"""


def pulsed_text(*, tau=2.8e-6, blocks=4, count=1, extra=""):
    """TOML of a one-nucleus PulsePol scenario; `extra` goes into `[drive]` (or a `[sweep]`)."""
    return PULSED.format(tau=tau, blocks=blocks, count=count, extra=extra)


THREE_NUCLEI = """
[spins]
field_t = 0.03
[[spins.nuclei]]
label = "A"
a_par_hz = 25e3
a_perp_hz = 12e3
[[spins.nuclei]]
label = "B"
a_par_hz = -10e3
a_perp_hz = 8e3
[[spins.nuclei]]
label = "C"
a_par_hz = 5e3
a_perp_hz = 15e3
[[spins.couplings]]
pair = ["A", "C"]
d_hz = 900.0
[[spins.couplings]]
pair = ["B", "C"]
d_hz = -400.0
[drive]
protocol = "spin-lock"
rabi_hz = 330e3
detuning_hz = 3e3
[sweep]
parameter = "rabi_hz"
start = 315e3
stop = 345e3
points = 4
[cycle]
interaction_time_s = 12e-6
count = 3
[trotter]
steps = 30
order = 2
"""


@pytest.fixture
def three_nuclei():
    """Three nuclei with two dipolar couplings and a detuning (invented test values)."""
    return parse_scenario(THREE_NUCLEI)


# three strongly coupled nuclei near the axis at azimuths 0°, ±120° (invented test values)
AZIMUTH_TRIPLE = """
[spins]
field_t = 0.02
[[spins.nuclei]]
label = "A"
position_nm = [0.16, 0.0, 0.62]
[[spins.nuclei]]
label = "B"
position_nm = [-0.08, 0.139, 0.62]
[[spins.nuclei]]
label = "C"
position_nm = [-0.08, -0.139, 0.62]
[drive]
protocol = "spin-lock"
rabi_hz = 240e3
[sweep]
parameter = "rabi_hz"
start = 240e3
stop = 285e3
points = 4
[cycle]
interaction_time_s = 100e-6
count = 4
"""


#: Two nuclei swept through their matches, small enough for end-to-end CLI runs.
TWO_NUCLEI_SWEEP = """
name = "small"
[spins]
field_t = 0.05
[[spins.nuclei]]
label = "C1"
a_par_hz = 20e3
a_perp_hz = 20e3
[[spins.nuclei]]
label = "C2"
a_par_hz = -30e3
a_perp_hz = 10e3
[drive]
protocol = "spin-lock"
rabi_hz = 530e3
[sweep]
parameter = "rabi_hz"
start = 515e3
stop = 550e3
points = 8
[cycle]
interaction_time_s = 20e-6
count = 3
[trotter]
steps = 60
"""
