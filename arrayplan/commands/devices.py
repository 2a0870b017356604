"""``arrayplan devices``: list audio host APIs and devices, or check one device."""

from __future__ import annotations

import argparse

from ._args import accept_old_spelling, nonnegative_count, positive_float, MAX_CHANNEL_NUMBER

__all__ = ["register", "run"]


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "devices", description="List the audio host APIs and devices PortAudio sees, with channel counts and default "
                               "rates.  With --device, show the one device an index or name substring selects (an "
                               "ambiguous name lists the candidates).")
    p.add_argument("--device", metavar="INDEX|NAME", help="index or part of the name of one device")
    p.add_argument("--inputs", type=nonnegative_count(MAX_CHANNEL_NUMBER), default=0, metavar="N",
                   help="check that it has at least N inputs")
    p.add_argument("--outputs", type=nonnegative_count(MAX_CHANNEL_NUMBER), default=0, metavar="N",
                   help="check that it has at least N outputs")
    p.add_argument("--rate-hz", type=positive_float, metavar="HZ", help="check that it runs at this sample rate, Hz")
    accept_old_spelling(p, "--rate-hz", "--rate")
    p.set_defaults(run=run, parameter_flags={"sample_rate_hz": "--rate-hz"})


def run(args: argparse.Namespace) -> int:
    from ..hardware.devices import (check_stream_settings, choose_device, default_device_index,
                                    format_device_table, list_devices, list_host_apis)

    devices = list_devices()
    if args.device is None and not (args.inputs or args.outputs or args.rate_hz):
        print(format_device_table(devices, list_host_apis(), default_device_index()))
        return 0
    dev = choose_device(args.device, n_inputs=args.inputs, n_outputs=args.outputs, devices=devices,
                        default_index=default_device_index())
    if args.rate_hz:
        check_stream_settings(dev, args.rate_hz, args.inputs, args.outputs)
    print(dev.label())
    return 0
