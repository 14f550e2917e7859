# Asks *IDN? and SYST:ERR? on a serial port with pyserial and prints the
# replies as JSON. Usage: python3 idn_client.py PORT
import json
import sys

import serial

port = serial.Serial(sys.argv[1], baudrate=115200, timeout=2)
out = {}
for cmd in ("*IDN?", "SYST:ERR?"):
    port.write((cmd + "\n").encode("ascii"))
    line = port.readline()
    if not line.endswith(b"\n"):
        sys.exit("no complete reply to %s: %r" % (cmd, line))
    out[cmd] = line[:-1].decode("ascii")
port.close()
print(json.dumps(out))
