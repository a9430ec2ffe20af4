"""Benchmark: one vectorised operating-point call for a fleet against a per-motor loop."""

import time

import numpy as np
from django.core.management.base import BaseCommand

from fleet.engineering.motor import LOAD_FAN, MotorCircuit, load_matching_rated_slip, operating_point


def random_fleet(n: int, seed: int = 1):
    rng = np.random.default_rng(seed)
    circuit = MotorCircuit.from_arrays(
        r1m=rng.uniform(25, 45, n),
        x1m=rng.uniform(6, 11, n),
        r1a=rng.uniform(60, 90, n),
        x1a=rng.uniform(12, 18, n),
        r2=rng.uniform(45, 65, n),
        x2=rng.uniform(6, 11, n),
        xm=rng.uniform(250, 340, n),
        turns_ratio=rng.uniform(1.25, 1.45, n),
        voltage_v=230.0,
        frequency_hz=50.0,
        poles=6,
        rotational_loss_w=6.0,
    )
    load = load_matching_rated_slip(circuit, 4.0, 0.09, np.full(n, LOAD_FAN))
    capacitance = rng.uniform(3.2, 4.2, n)
    return circuit, load, capacitance


class Command(BaseCommand):
    help = "Print how long one vectorised operating-point solve takes for a fleet, beside a per-motor loop."

    def add_arguments(self, parser):
        parser.add_argument("--motors", type=int, default=100_000)
        parser.add_argument(
            "--loop-sample", type=int, default=300, help="Motors timed in the per-motor loop (extrapolated)."
        )

    def handle(self, *args, **options):
        n, sample = options["motors"], options["loop_sample"]
        circuit, load, capacitance = random_fleet(n)
        started = time.perf_counter()
        point = operating_point(circuit, capacitance, load)
        vectorised_s = time.perf_counter() - started
        started = time.perf_counter()
        for i in range(sample):
            operating_point(circuit.take(i), capacitance[i], load.take(i))
        loop_per_motor_s = (time.perf_counter() - started) / sample
        self.stdout.write(f"motors: {n}")
        self.stdout.write(f"vectorised, one call: {vectorised_s:.2f} s ({n / vectorised_s:,.0f} motors/s)")
        self.stdout.write(
            f"per-motor loop: {loop_per_motor_s * 1e3:.2f} ms a motor, {loop_per_motor_s * n:.0f} s for the fleet "
            f"(extrapolated from {sample}); speed-up {loop_per_motor_s * n / vectorised_s:.0f}x"
        )
        self.stdout.write(f"stalled: {int(np.isnan(point.slip).sum())}")
