"""Identification runs: the excitation signals against their definitions, and `excite` on the simulated rig.

The signals (daemon/control/excitation.py) are checked against the published
definitions of a linear chirp and of a maximal-length sequence, and against
scipy's implementations of both. The end-to-end run goes from READY through
EXCITE back to READY on Kestrel-1 over a real pty, in lockstep.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy.signal import chirp, max_len_seq
from test_daemon_support import (
    execute_when_still,
    homed_and_ready,
    recorded_samples,
    run_for,
    running_service,
    wait_for,
)

from daemon.control.excitation import CHIRP_END_HZ, CHIRP_START_HZ, PRBS_BIT_S, Excitation
from daemon.errors import CommandRefused
from daemon.supervisor import State

PRBS_PERIOD_BITS = 2**7 - 1


def prbs_bits(count: int, amplitude: float = 1.0) -> np.ndarray:
    """``count`` bits of the PRBS, each read in the middle of its bit time."""
    signal = Excitation("prbs", amplitude, 1e3)
    return np.array([signal.value((k + 0.5) * PRBS_BIT_S) for k in range(count)])


# --- chirp ------------------------------------------------------------------------------------


def test_chirp_matches_scipys_linear_chirp():
    # scipy.signal.chirp(method="linear") is cos(2 pi (f0 t + (f1 - f0) t^2 / (2 T)) + phi);
    # phi = -90 deg makes it the sine that starts at zero.
    duration_s, amplitude = 8.0, 1.5
    signal = Excitation("chirp", amplitude, duration_s)
    t = np.linspace(0.0, duration_s, 4001)
    ours = np.array([signal.value(ti) for ti in t])
    reference = amplitude * chirp(t, CHIRP_START_HZ, duration_s, CHIRP_END_HZ, method="linear", phi=-90.0)
    assert np.max(np.abs(ours - reference)) < 1e-9


def test_chirp_instantaneous_frequency_rises_linearly_from_start_to_end():
    # A linear chirp's instantaneous frequency, the phase's rate over 2 pi, is f0 + (f1 - f0) t / T
    # (e.g. Klauder, Price, Darlington & Albersheim, "The theory and design of chirp radars",
    # Bell System Technical Journal, 1960). Between two zero crossings the phase turns by pi,
    # so 1 / (2 dt) is the frequency at their midpoint (to second order in the sweep rate).
    duration_s = 10.0
    signal = Excitation("chirp", 1.0, duration_s)
    t = np.linspace(0.0, duration_s, 200_001)
    values = np.array([signal.value(ti) for ti in t])
    crossings = []
    for i in np.flatnonzero(np.signbit(values[1:]) != np.signbit(values[:-1])):
        # linear interpolation of the crossing inside the step
        crossings.append(t[i] - values[i] * (t[i + 1] - t[i]) / (values[i + 1] - values[i]))
    crossings = np.array(crossings[1:])  # the first is the start at t = 0
    midpoints = (crossings[1:] + crossings[:-1]) / 2
    measured_hz = 1.0 / (2.0 * np.diff(crossings))
    expected_hz = CHIRP_START_HZ + (CHIRP_END_HZ - CHIRP_START_HZ) * midpoints / duration_s
    assert np.max(np.abs(measured_hz - expected_hz)) < 1e-3
    slope, intercept = np.polyfit(midpoints, measured_hz, 1)
    assert intercept == pytest.approx(CHIRP_START_HZ, abs=1e-3)
    assert intercept + slope * duration_s == pytest.approx(CHIRP_END_HZ, abs=1e-3)
    assert np.max(np.abs(values)) == pytest.approx(1.0, abs=1e-6)


# --- PRBS -------------------------------------------------------------------------------------


def test_prbs_repeats_with_the_period_of_a_7_bit_maximal_length_sequence():
    # A maximal-length sequence of an n-stage LFSR has period 2^n - 1 (Golomb, "Shift Register
    # Sequences", 1967, ch. III): 127 for n = 7, and no shorter period.
    bits = prbs_bits(3 * PRBS_PERIOD_BITS)
    assert np.array_equal(bits[:PRBS_PERIOD_BITS], bits[PRBS_PERIOD_BITS : 2 * PRBS_PERIOD_BITS])
    assert np.array_equal(bits[:PRBS_PERIOD_BITS], bits[2 * PRBS_PERIOD_BITS :])
    one_period = bits[:PRBS_PERIOD_BITS]
    assert all(not np.array_equal(one_period, np.roll(one_period, p)) for p in range(1, PRBS_PERIOD_BITS))


def test_prbs_has_the_balance_run_and_correlation_properties_of_an_m_sequence():
    # Golomb, "Shift Register Sequences", 1967, ch. III (postulates, which every
    # m-sequence meets): in one period 2^(n-1) ones and 2^(n-1) - 1 zeros; of the runs, half
    # have length 1, a quarter length 2, ...; periodic autocorrelation N at lag 0, -1 elsewhere.
    bits = prbs_bits(PRBS_PERIOD_BITS)
    assert set(bits) == {-1.0, 1.0}
    assert np.count_nonzero(bits > 0) == 64 and np.count_nonzero(bits < 0) == 63
    start = int(np.flatnonzero(bits != np.roll(bits, 1))[0])  # begin at a run boundary
    rotated = np.roll(bits, -start)
    runs = np.diff(np.flatnonzero(np.r_[True, rotated[1:] != rotated[:-1], True]))
    counts = {length: int(np.count_nonzero(runs == length)) for length in range(1, 8)}
    assert len(runs) == 64
    assert counts == {1: 32, 2: 16, 3: 8, 4: 4, 5: 2, 6: 1, 7: 1}  # one run of 6 zeros, one of 7 ones
    correlation = [float(np.dot(bits, np.roll(bits, lag))) for lag in range(PRBS_PERIOD_BITS)]
    assert correlation[0] == PRBS_PERIOD_BITS and set(correlation[1:]) == {-1.0}


def test_prbs_is_scipys_7_bit_maximal_length_sequence():
    # scipy.signal.max_len_seq(7) read backwards (the sequence of the reciprocal polynomial)
    # is exactly ours, bit for bit from the first.
    reference = max_len_seq(7)[0][::-1] * 2.0 - 1.0
    assert np.array_equal(prbs_bits(PRBS_PERIOD_BITS), reference)


def test_prbs_holds_each_bit_for_its_bit_time_at_the_amplitude():
    signal = Excitation("prbs", 0.8, 10.0)
    times = np.arange(0.0, 40 * PRBS_BIT_S, PRBS_BIT_S / 10)
    values = np.array([signal.value(t) for t in times])
    assert set(np.round(values, 12)) == {-0.8, 0.8}
    per_bit = values.reshape(-1, 10)
    assert np.all(per_bit == per_bit[:, :1])


# --- step and run length ----------------------------------------------------------------------


def test_step_is_the_amplitude_for_the_whole_run_and_done_at_its_end():
    signal = Excitation("step", 2.5, 3.0)
    assert all(signal.value(t) == 2.5 for t in (0.0, 0.001, 1.5, 2.999))
    assert not signal.done(2.999) and signal.done(3.0)


def test_an_unknown_kind_is_refused_naming_the_kinds():
    with pytest.raises(ValueError, match="excite: unknown kind 'sine' \\(chirp, prbs or step\\)"):
        Excitation("sine", 1.0, 1.0)


# --- on the simulated rig ---------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["chirp", "prbs", "step"])
async def test_excite_from_ready_records_every_sample_as_excite_and_returns_to_ready(tmp_path, kind):
    duration_s = 3.0
    async with running_service(tmp_path) as service:
        service.start_recording("identification")
        await homed_and_ready(service)
        # no amplitude: the daemon sizes it for the rig
        result = await execute_when_still(service, "excite", {"kind": kind, "duration_s": duration_s})
        assert result == {"state": "EXCITE", "previous": "READY"}
        amplitude = service.supervisor.machine.excite_args["amplitude"]
        assert 0.0 < amplitude <= service.config.drive.limit
        assert "excite" not in service.supervisor.machine.allowed_commands()
        assert await wait_for(service, State.READY, State.FAULT) is State.READY
        await run_for(service, 0.2)
        assert service.supervisor.machine.faults == []
        samples = recorded_samples(service)
        modes = [row["mode"] for row in samples]
        first = modes.index(State.EXCITE)
        last = len(modes) - 1 - modes[::-1].index(State.EXCITE)
        run = samples[first : last + 1]
        assert all(row["mode"] == State.EXCITE for row in run)  # one unbroken stretch
        assert modes[last + 1] == State.READY
        rate_hz = service.config.sampling.rate_hz
        assert len(run) == pytest.approx(duration_s * rate_hz, abs=2)
        seqs = [row["seq"] for row in run]
        assert all((b - a) % 65536 == 1 for a, b in itertools.pairwise(seqs))  # none missing
        soft_limit_m = service.supervisor.limits.soft_limit_m
        assert max(abs(row["x_m"]) for row in run) < soft_limit_m
        # The excitation is on the drive: it differs from the hold loop's command alone.
        assert max(abs(row["drive_sent"]) for row in run) > amplitude / 2
        assert math.isfinite(sum(row["drive_sent"] for row in run))


async def test_the_readme_chirp_runs_on_the_demo_rig_well_inside_the_soft_limits(tmp_path):
    # README: `poise excite --kind chirp --duration 10` on Kestrel-1. With the 2 V it used to
    # name, the cart tripped track.stopping_distance 0.59 s in.
    async with running_service(tmp_path) as service:
        service.start_recording("identification")
        await homed_and_ready(service)
        await execute_when_still(service, "excite", {"kind": "chirp", "duration_s": 10.0})
        assert await wait_for(service, State.READY, State.FAULT) is State.READY
        await run_for(service, 5.0)  # the hold loop brings the cart back after the run
        assert service.supervisor.machine.faults == []
        samples = [row for row in recorded_samples(service) if row["mode"] in (State.EXCITE, State.READY)]
        soft_limit_m = service.supervisor.limits.soft_limit_m
        assert max(abs(row["x_m"]) for row in samples) < 0.5 * soft_limit_m


async def test_an_amplitude_predicted_to_leave_the_soft_limits_is_refused_naming_the_largest_safe_one(tmp_path):
    async with running_service(tmp_path) as service:
        await homed_and_ready(service)
        with pytest.raises(CommandRefused) as refused:
            await execute_when_still(service, "excite", {"kind": "step", "amplitude": 2.0, "duration_s": 10.0})
        reason = refused.value.reason
        assert reason.startswith(
            "excite: a 10 s step of amplitude 2 V is predicted to take the cart past the soft limits "
            "±0.360 m; the largest safe amplitude here is "
        )
        assert "\n" not in reason
        assert service.supervisor.machine.state is State.READY
        largest = float(reason.split("the largest safe amplitude here is ")[1].split(" V")[0])
        # the amplitude it names is taken
        await execute_when_still(service, "excite", {"kind": "step", "amplitude": largest, "duration_s": 10.0})
        assert service.supervisor.machine.state is State.EXCITE
