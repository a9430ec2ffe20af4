"""Two-winding single-phase capacitor motor: standstill, running, operating point.

Conventions (checked by the tests against Chapman and Fitzgerald):
- `z_forward` and `z_backward` are the FULL parallel rotor impedances
  ZF = jXM (R2/s + jX2) / (R2/s + j(X2 + XM)), ZB = ZF at slip 2 - s. The circuit
  uses Z+ = (ZF + ZB)/2 and Z- = (ZF - ZB)/2, so the main winding alone sees
  Z1 + ZF/2 + ZB/2, as in Chapman sec. 9-2.
- Rotor quantities are referred to the main winding; `turns_ratio` a is the
  auxiliary/main effective turns ratio.
- Forward rotation is the one the auxiliary current makes when it leads the main
  current; the phase shift is the angle of i_aux ahead of i_main, degrees.
- Every function broadcasts over numpy arrays (a fleet at once); loops run over
  solver iterations or grid points, never over motors.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np
from scipy.optimize.elementwise import find_root

from .capacitor import reactance_ohm

TWO_PI = 2.0 * np.pi

LOAD_FAN = 0  # torque ~ speed^2 (fans, centrifugal pumps)
LOAD_CONSTANT = 1  # torque about constant (compressors, conveyors)
LOAD_TYPE_FAN_LAW = "fan_law"  # the register's names for the two load kinds
LOAD_TYPE_CONSTANT = "constant"


def load_kind_from_type(load_type):
    """LOAD_FAN or LOAD_CONSTANT for each register load type (LOAD_TYPE_*)."""
    return np.where(np.asarray(load_type, object) == LOAD_TYPE_FAN_LAW, LOAD_FAN, LOAD_CONSTANT)


def synchronous_speed_rad_s(frequency_hz, poles):
    """Mechanical synchronous speed omega_s = 4 pi f / P, rad/s."""
    return 4.0 * np.pi * np.asarray(frequency_hz, float) / np.asarray(poles, float)


def rotor_impedance(r2, x2, xm, slip):
    """Full parallel rotor branch jXM || (R2/s + jX2), ohms (the ZF convention)."""
    z_rotor = np.asarray(r2, float) / np.asarray(slip, float) + 1j * np.asarray(x2)
    z_mag = 1j * np.asarray(xm, float)
    return z_mag * z_rotor / (z_mag + z_rotor)


def capacitor_impedance(capacitance_uf, frequency_hz, esr_ohm=0.0):
    """ZC = ESR - j/(omega C); infinite (nan-free) handling is left to callers."""
    return np.asarray(esr_ohm, float) - 1j * reactance_ohm(capacitance_uf, frequency_hz)


# --- standstill -----------------------------------------------------------------


@dataclass(frozen=True)
class StandstillResult:
    """Branch currents at standstill (slip = 1), complex amperes and volts."""

    i_main: np.ndarray
    i_aux: np.ndarray
    i_line: np.ndarray
    v_capacitor: np.ndarray
    phase_shift_deg: np.ndarray  # auxiliary current ahead of main current
    torque_index: np.ndarray  # a |Im| |Ia| sin(theta), A^2; proportional to torque


def standstill(
    z_main, z_aux, capacitance_uf, voltage_v, frequency_hz, turns_ratio=1.0, esr_ohm=0.0
) -> StandstillResult:
    """Locked-rotor currents of both windings with a capacitor in the auxiliary.

    z_main and z_aux are the windings' locked-rotor impedances (complex ohms).
    Im = V/Zm, Ia = V/(Za + ZC), IL = Im + Ia, Vc = Ia ZC.
    """
    v = np.asarray(voltage_v, float)
    z_c = capacitor_impedance(capacitance_uf, frequency_hz, esr_ohm)
    i_main = v / np.asarray(z_main)
    i_aux = v / (np.asarray(z_aux) + z_c)
    theta = np.angle(i_aux) - np.angle(i_main)
    theta = (theta + np.pi) % TWO_PI - np.pi
    torque_index = np.asarray(turns_ratio, float) * np.abs(i_main) * np.abs(i_aux) * np.sin(theta)
    return StandstillResult(
        i_main=i_main,
        i_aux=i_aux,
        i_line=i_main + i_aux,
        v_capacitor=i_aux * z_c,
        phase_shift_deg=np.degrees(theta),
        torque_index=torque_index,
    )


def starting_torque_nm(result: StandstillResult, rotor_resistance_ohm, frequency_hz, poles, turns_ratio=1.0):
    """Starting torque, N m: T = 2 a Re(Zlr) |Im||Ia| sin(theta) / omega_s.

    rotor_resistance_ohm is Re of the full rotor branch at standstill, ZF(s=1).
    """
    del turns_ratio  # already inside result.torque_index
    scale = 2.0 * np.asarray(rotor_resistance_ohm, float)
    return scale * result.torque_index / synchronous_speed_rad_s(frequency_hz, poles)


def _uf_from_reactance(x_c, frequency_hz):
    return 1e6 / (TWO_PI * np.asarray(frequency_hz, float) * x_c)


def quadrature_capacitance_uf(z_main, z_aux, frequency_hz):
    """Capacitance that puts the auxiliary current 90 deg ahead of the main one.

    Xc = Xa + Ra Rm / Xm (docs/engineering.md). Reference value for outside checks (a
    public entry point); the application itself does not call it.
    """
    z_main, z_aux = np.asarray(z_main), np.asarray(z_aux)
    x_c = z_aux.imag + z_aux.real * z_main.real / z_main.imag
    return _uf_from_reactance(x_c, frequency_hz)


def max_starting_torque_capacitance_uf(z_main, z_aux, frequency_hz):
    """Capacitance for the largest starting torque: Xc = Xa + Ra (|Zm| - Xm) / Rm.

    Reference value for outside checks and the tests (a public entry point); the
    application itself does not call it.
    """
    z_main, z_aux = np.asarray(z_main), np.asarray(z_aux)
    x_c = z_aux.imag + z_aux.real * (np.abs(z_main) - z_main.imag) / z_main.real
    return _uf_from_reactance(x_c, frequency_hz)


# --- running --------------------------------------------------------------------


@dataclass(frozen=True)
class SingleWindingResult:
    """Main winding alone, running (Chapman's single-phase induction motor)."""

    current: np.ndarray
    z_forward: np.ndarray
    z_backward: np.ndarray
    air_gap_power_w: np.ndarray  # net: forward minus backward
    torque_nm: np.ndarray
    input_power_w: np.ndarray


def single_winding_running(r1, x1, r2, x2, xm, slip, voltage_v, frequency_hz, poles) -> SingleWindingResult:
    """Main winding alone at slip s: I = V / (Z1 + ZF/2 + ZB/2).

    Air-gap power (ReZF - ReZB)|I|^2 / 2, torque = air-gap power / omega_s.
    """
    slip = np.asarray(slip, float)
    z_f = rotor_impedance(r2, x2, xm, slip)
    z_b = rotor_impedance(r2, x2, xm, 2.0 - slip)
    v = np.asarray(voltage_v, float)
    current = v / (np.asarray(r1) + 1j * np.asarray(x1) + 0.5 * (z_f + z_b))
    air_gap = 0.5 * np.abs(current) ** 2 * (z_f.real - z_b.real)
    return SingleWindingResult(
        current=current,
        z_forward=z_f,
        z_backward=z_b,
        air_gap_power_w=air_gap,
        torque_nm=air_gap / synchronous_speed_rad_s(frequency_hz, poles),
        input_power_w=np.real(v * np.conj(current)),
    )


@dataclass(frozen=True)
class MotorCircuit:
    """Equivalent circuit of a fleet of capacitor motors, one array entry a motor.

    Ohms per phase, rotor referred to the main winding. `rotational_loss_w` is
    friction, windage and core loss at rated speed, taken as a constant torque.
    """

    r1m: np.ndarray
    x1m: np.ndarray
    r1a: np.ndarray
    x1a: np.ndarray
    r2: np.ndarray
    x2: np.ndarray
    xm: np.ndarray
    turns_ratio: np.ndarray
    voltage_v: np.ndarray
    frequency_hz: np.ndarray
    poles: np.ndarray
    rotational_loss_w: np.ndarray

    @classmethod
    def from_arrays(cls, **values) -> MotorCircuit:
        """Build with every field as a float array, broadcast to one shape."""
        arrays = np.broadcast_arrays(*(np.asarray(values[f.name], float) for f in fields(cls)))
        return cls(*(np.array(a, dtype=float) for a in arrays))

    def take(self, index) -> MotorCircuit:
        """The motors selected by an index or boolean mask."""
        return replace(self, **{f.name: getattr(self, f.name)[index] for f in fields(self)})

    def __len__(self) -> int:
        return int(np.size(self.r1m))

    @property
    def z_main_locked(self):
        """Main winding impedance at standstill, Z1m + ZF(1)."""
        return self.r1m + 1j * self.x1m + rotor_impedance(self.r2, self.x2, self.xm, 1.0)

    @property
    def z_aux_locked(self):
        """Auxiliary winding impedance at standstill, Z1a + a^2 ZF(1)."""
        z_lr = rotor_impedance(self.r2, self.x2, self.xm, 1.0)
        return self.r1a + 1j * self.x1a + self.turns_ratio**2 * z_lr

    @property
    def synchronous_speed_rad_s(self):
        return synchronous_speed_rad_s(self.frequency_hz, self.poles)


@dataclass(frozen=True)
class RunningResult:
    """Both windings running at slip s. Complex amperes and volts; watts; N m."""

    slip: np.ndarray
    speed_rad_s: np.ndarray
    i_main: np.ndarray
    i_aux: np.ndarray
    i_line: np.ndarray
    v_capacitor: np.ndarray
    i_forward: np.ndarray
    i_backward: np.ndarray
    z_forward: np.ndarray
    z_backward: np.ndarray
    air_gap_forward_w: np.ndarray
    air_gap_backward_w: np.ndarray
    torque_nm: np.ndarray  # induced (air-gap) torque
    shaft_torque_nm: np.ndarray  # after rotational losses
    mechanical_power_w: np.ndarray
    output_power_w: np.ndarray
    input_power_w: np.ndarray
    copper_loss_main_w: np.ndarray
    copper_loss_aux_w: np.ndarray
    rotor_copper_loss_w: np.ndarray
    efficiency: np.ndarray
    power_factor: np.ndarray
    phase_shift_deg: np.ndarray

    @property
    def backward_ratio(self):
        """|Ib| / |If|: zero for a balanced motor, grows as the capacitor drifts."""
        return np.abs(self.i_backward) / np.abs(self.i_forward)


def two_winding_running(circuit: MotorCircuit, capacitance_uf, slip, esr_ohm=0.0, aux_in_circuit=True) -> RunningResult:
    """Solve both winding equations at slip s (double revolving field).

    V = Im (Z1m + Z+) - j a Ia Z-
    V = j a Im Z- + Ia (Z1a + ZC + a^2 Z+)
    With the auxiliary open (capacitor-start after cut-out, zero capacitance, or
    aux_in_circuit False) Ia = 0 and the main winding runs alone.
    """
    with np.errstate(invalid="ignore", divide="ignore"):  # a stalled motor's slip is nan
        return _two_winding_running(circuit, capacitance_uf, slip, esr_ohm, aux_in_circuit)


def _two_winding_running(circuit, capacitance_uf, slip, esr_ohm, aux_in_circuit) -> RunningResult:
    c = circuit
    s = np.asarray(slip, float)
    a = c.turns_ratio
    v = c.voltage_v
    z_f = rotor_impedance(c.r2, c.x2, c.xm, s)
    z_b = rotor_impedance(c.r2, c.x2, c.xm, 2.0 - s)
    z_plus, z_minus = 0.5 * (z_f + z_b), 0.5 * (z_f - z_b)
    z_mm = c.r1m + 1j * c.x1m + z_plus
    cap = np.asarray(capacitance_uf, float)
    aux_open = ~np.asarray(aux_in_circuit, bool) | ~(cap > 0)
    safe_cap = np.where(aux_open, 1.0, cap)
    z_aa = c.r1a + 1j * c.x1a + capacitor_impedance(safe_cap, c.frequency_hz, esr_ohm) + a**2 * z_plus
    det = z_mm * z_aa - a**2 * z_minus**2
    i_main = np.where(aux_open, v / z_mm, v * (z_aa + 1j * a * z_minus) / det)
    i_aux = np.where(aux_open, 0.0 + 0.0j, v * (z_mm - 1j * a * z_minus) / det)
    z_c = np.where(aux_open, 0.0, capacitor_impedance(safe_cap, c.frequency_hz, esr_ohm))
    i_f = 0.5 * (i_main - 1j * a * i_aux)
    i_b = 0.5 * (i_main + 1j * a * i_aux)
    p_gf = 2.0 * np.abs(i_f) ** 2 * z_f.real
    p_gb = 2.0 * np.abs(i_b) ** 2 * z_b.real
    omega_s = c.synchronous_speed_rad_s
    torque = (p_gf - p_gb) / omega_s
    mechanical = (1.0 - s) * (p_gf - p_gb)
    speed = omega_s * (1.0 - s)
    # Rotational losses as a constant torque, sized at synchronous speed.
    shaft_torque = torque - c.rotational_loss_w / omega_s
    output = shaft_torque * speed
    i_line = i_main + i_aux
    s_in = v * np.conj(i_line)
    input_power = s_in.real
    theta = np.angle(i_aux) - np.angle(i_main)
    theta = np.where(aux_open, np.nan, (theta + np.pi) % TWO_PI - np.pi)
    efficiency = np.where(input_power > 0, output / input_power, np.nan)
    power_factor = input_power / np.abs(s_in)
    return RunningResult(
        slip=np.broadcast_to(s, i_main.shape),
        speed_rad_s=np.broadcast_to(speed, i_main.shape),
        i_main=i_main,
        i_aux=i_aux,
        i_line=i_line,
        v_capacitor=i_aux * z_c,
        i_forward=i_f,
        i_backward=i_b,
        z_forward=z_f,
        z_backward=z_b,
        air_gap_forward_w=p_gf,
        air_gap_backward_w=p_gb,
        torque_nm=torque,
        shaft_torque_nm=shaft_torque,
        mechanical_power_w=mechanical,
        output_power_w=output,
        input_power_w=input_power,
        copper_loss_main_w=np.abs(i_main) ** 2 * c.r1m,
        copper_loss_aux_w=np.abs(i_aux) ** 2 * c.r1a,
        rotor_copper_loss_w=s * p_gf + (2.0 - s) * p_gb,
        efficiency=efficiency,
        power_factor=power_factor,
        phase_shift_deg=np.degrees(theta),
    )


# --- operating point --------------------------------------------------------------


@dataclass(frozen=True)
class Load:
    """Driven load: torque at rated speed and how it varies with speed."""

    torque_at_rated_nm: np.ndarray
    rated_speed_rad_s: np.ndarray
    kind: np.ndarray  # LOAD_FAN or LOAD_CONSTANT

    def take(self, index) -> Load:
        """The loads selected by an index or boolean mask (as `MotorCircuit.take`)."""
        return Load(
            np.asarray(self.torque_at_rated_nm)[index],
            np.asarray(self.rated_speed_rad_s)[index],
            np.asarray(self.kind)[index],
        )

    def torque_nm(self, speed_rad_s):
        exponent = np.where(np.asarray(self.kind) == LOAD_FAN, 2.0, 0.0)
        ratio = np.clip(speed_rad_s / self.rated_speed_rad_s, 0.0, None)
        return self.torque_at_rated_nm * ratio**exponent


def operating_point(
    circuit: MotorCircuit,
    capacitance_uf,
    load: Load,
    aux_in_circuit=True,
    esr_ohm=0.0,
    grid_points=80,
    iterations=40,
) -> RunningResult:
    """Running point where shaft torque meets load torque, for every motor at once.

    A grid over slip finds, per motor, the first slip from synchronous speed at
    which the motor's shaft torque exceeds the load's; scipy's elementwise
    bracketing root finder (Chandrupatla) then narrows the bracket to 1e-14 in
    slip. Motors whose torque never meets the load (stalled) get slip nan.
    `iterations` caps the root finder's iterations.
    """
    omega_s = circuit.synchronous_speed_rad_s
    shape = np.broadcast_shapes(np.shape(circuit.r1m), np.shape(capacitance_uf))

    def excess(slip):
        run = two_winding_running(circuit, capacitance_uf, slip, esr_ohm, aux_in_circuit)
        return run.shaft_torque_nm - load.torque_nm(omega_s * (1.0 - slip))

    grid = np.concatenate([np.linspace(1e-4, 0.3, grid_points - 20), np.linspace(0.31, 0.99, 20)])
    lo = np.full(shape, np.nan)
    hi = np.full(shape, np.nan)
    previous = np.full(shape, grid[0])
    previous_excess = excess(np.full(shape, grid[0]))
    for s in grid[1:]:
        current = excess(np.full(shape, s))
        found = np.isnan(lo) & (previous_excess <= 0) & (current > 0)
        lo = np.where(found, previous, lo)
        hi = np.where(found, s, hi)
        previous, previous_excess = np.full(shape, s), current
        if not np.isnan(lo).any():
            break  # every motor bracketed: the rest of the grid cannot change it
    stalled = np.isnan(lo)
    slip = _root_in_bracket(
        circuit,
        capacitance_uf,
        load,
        aux_in_circuit,
        esr_ohm,
        np.where(stalled, 0.5, lo),
        np.where(stalled, 0.6, hi),
        iterations,
    )
    slip = np.where(stalled, np.nan, slip)
    return two_winding_running(circuit, capacitance_uf, slip, esr_ohm, aux_in_circuit)


_SLIP_TOLERANCES = {"xatol": 1e-14, "xrtol": 0.0, "fatol": 0.0, "frtol": 0.0}


def _root_in_bracket(circuit, capacitance_uf, load, aux_in_circuit, esr_ohm, lower, upper, iterations=40):
    """Slip in [lower, upper] where shaft torque equals load torque, every motor at once.

    The finder calls its function on the motors still converging only, so every
    per-motor quantity travels as an argument array, broadcast to the brackets.
    """
    names = [f.name for f in fields(MotorCircuit)]
    per_motor = np.broadcast_arrays(
        lower,
        *(getattr(circuit, name) for name in names),
        np.asarray(capacitance_uf, float),
        np.asarray(esr_ohm, float),
        np.asarray(aux_in_circuit, float),
        load.torque_at_rated_nm,
        load.rated_speed_rad_s,
        np.asarray(load.kind, float),
    )[1:]

    def excess(slip, *values):
        part = MotorCircuit(*values[: len(names)])
        capacitance, esr, aux, torque_at_rated, rated_speed, kind = values[len(names) :]
        run = two_winding_running(part, capacitance, slip, esr, aux > 0.5)
        return run.shaft_torque_nm - Load(torque_at_rated, rated_speed, kind).torque_nm(
            part.synchronous_speed_rad_s * (1.0 - slip)
        )

    found = find_root(excess, (lower, upper), args=tuple(per_motor), tolerances=_SLIP_TOLERANCES, maxiter=iterations)
    return found.x


def load_matching_rated_slip(
    circuit: MotorCircuit, rated_capacitance_uf, rated_slip, kind, aux_in_circuit=True
) -> Load:
    """The load that the as-new motor drives at its rated slip.

    Anchoring the load to the as-new point means a capacitance drift moves the
    operating point only because the motor changed.
    """
    as_new = two_winding_running(circuit, rated_capacitance_uf, rated_slip, aux_in_circuit=aux_in_circuit)
    return Load(
        torque_at_rated_nm=as_new.shaft_torque_nm,
        rated_speed_rad_s=circuit.synchronous_speed_rad_s * (1.0 - np.asarray(rated_slip, float)),
        kind=np.asarray(kind),
    )
