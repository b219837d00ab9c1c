"""`pnbench sim`: serve the simulated SMU, LCR meter and thermal stage on loopback TCP.

Prints the three VISA resource strings (or, with --json, one JSON object) and serves until
Ctrl-C, SIGTERM or SIGHUP; then both outputs go off and it exits 0. A client that
disconnects finds its instrument's output turned off too.
"""

from __future__ import annotations

import argparse
import json
import sys

from pnbench.errors import BadInput
from pnbench.tui.commands.options import TIME_SCALE_MAX, integer, number

HELP = "serve a simulated SMU and LCR meter with a simulated diode on loopback TCP"

_LOOPBACK = ("127.0.0.1", "localhost", "::1")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.epilog = (
        "Example: pnbench sim --dut lh-vc510 --time-scale 0, then point pnbench or any "
        "VISA client (backend @py) at the two printed resources. Each instrument serves "
        "one client at a time and turns its output off when that client disconnects; "
        "Ctrl-C stops the bench with both outputs off and exits 0. Every key of a device "
        "file is documented at the top of each bundled file.")
    parser.add_argument(
        "--dut", metavar="FILE",
        help="simulated-device file (TOML), or the name of a bundled device (see --list)")
    parser.add_argument("--smu-port", type=integer(0, 65535), default=0, metavar="N",
                        help="TCP port of the SMU (default: any free port)")
    parser.add_argument("--lcr-port", type=integer(0, 65535), default=0, metavar="N",
                        help="TCP port of the LCR meter (default: any free port)")
    parser.add_argument("--stage-port", type=integer(0, 65535), default=0, metavar="N",
                        help="TCP port of the thermal stage (default: any free port)")
    parser.add_argument(
        "--time-scale", type=number(0.0, TIME_SCALE_MAX), default=1.0, metavar="X",
        help="instrument time factor: 0 answers as fast as possible, 1 (default) takes as "
             "long as the simulated instruments would")
    parser.add_argument(
        "--host", default="127.0.0.1", metavar="ADDR",
        help="address to listen on (default 127.0.0.1; any other address lets other "
             "machines drive the simulated instruments)")
    parser.add_argument("--list", action="store_true",
                        help="list the bundled simulated devices and exit")
    parser.add_argument("--json", action="store_true",
                        help="print the resource strings as one JSON object")


def _list_devices() -> int:
    from pnbench.drivers.sim.device import bundled_devices, load_device

    for name, path in bundled_devices().items():
        device = load_device(path)
        print(f"{name:12s} {device.part:10s} {device.device['description']}\n"
              f"{'':12s} {path}")
    return 0


def run(args: argparse.Namespace) -> int:
    import signal
    import threading

    from pnbench.drivers.sim.bench import SimBench

    if args.list:
        return _list_devices()
    if not args.dut:
        raise BadInput("pnbench sim: --dut is required: give a simulated-device file or the "
                       "name of a bundled device (pnbench sim --list shows them)")
    bench = SimBench.start(args.dut, time_scale=args.time_scale, smu_port=args.smu_port,
                           lcr_port=args.lcr_port, host=args.host,
                           stage_port=args.stage_port)
    stop = threading.Event()
    previous = {}
    if threading.current_thread() is threading.main_thread():
        for name in ("SIGTERM", "SIGHUP"):
            number = getattr(signal, name, None)
            if number is not None:
                previous[number] = signal.signal(number, lambda *_: stop.set())
    try:
        if args.json:
            print(json.dumps({"smu_resource": bench.smu_resource,
                              "lcr_resource": bench.lcr_resource,
                              "stage_resource": bench.stage_resource,
                              "device": bench.device.part, "time_scale": bench.time_scale}))
        else:
            print(f"SMU  {bench.smu_resource}")
            print(f"LCR  {bench.lcr_resource}")
            print(f"stage  {bench.stage_resource}")
            print(f"simulating {bench.device.part} from {bench.device.source} at time scale "
                  f"{bench.time_scale:g}; Ctrl-C stops (outputs go off)")
        if args.host not in _LOOPBACK:
            print(f"pnbench sim: listening on {args.host}: anyone who can reach this address "
                  "can drive the simulated instruments", file=sys.stderr)
        sys.stdout.flush()
        while not stop.wait(0.2):
            pass
    except KeyboardInterrupt:
        pass
    finally:
        bench.close()
        for number, handler in previous.items():
            signal.signal(number, handler)
    print("pnbench sim: stopped; outputs off", file=sys.stderr)
    return 0
