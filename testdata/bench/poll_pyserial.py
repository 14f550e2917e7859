#!/usr/bin/env python3
"""Peer of hystd's sampler (acq/sampler) for BenchmarkSampleBesidePyserial:
a sequential polling script with pyserial (Debian's python3-serial), as one
would write it by hand. It opens the supply, integrator and field-meter
ports and, for each sample, asks the same queries the sampler asks
(current, voltage, flux, field), each answered before the next is sent,
and parses every reply as a number. After one untimed sample it polls
SAMPLES samples and prints the seconds they took.

    /usr/bin/python3 poll_pyserial.py BAUD SAMPLES SUPPLY INTEGRATOR FIELDMETER
"""
import sys
import time

import serial


def ask(port, query):
    port.write(query.encode() + b"\n")
    line = port.readline()
    if not line.endswith(b"\n"):
        sys.exit("no reply to %s on %s (got %r)" % (query, port.port, line))
    return float(line)


def main(baud, samples, supply, integrator, fieldmeter):
    sup, integ, field = (serial.Serial(p, baud, timeout=1.0) for p in (supply, integrator, fieldmeter))

    def sample():
        return (ask(sup, "MEAS:CURR?"), ask(sup, "MEAS:VOLT?"), ask(integ, "FETC:FLUX?"), ask(field, "MEAS:FIEL?"))

    sample()
    t0 = time.perf_counter()
    for _ in range(samples):
        sample()
    print(time.perf_counter() - t0)


if __name__ == "__main__":
    main(int(sys.argv[1]), int(sys.argv[2]), *sys.argv[3:6])
