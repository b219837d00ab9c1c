"""Checks shared by the commands' options, made before anything is created or connected.

Numbers given on the command line are finite and in a sane range (argparse names the
option and exits 2); an output folder is checked for being a folder that can be written
to, without creating it.
"""

from __future__ import annotations

import argparse
import math
import os
from pathlib import Path

from pnbench.errors import BadInput

#: Time scales of the simulated bench: 0 (as fast as possible) up to a slowed-down bench.
TIME_SCALE_MAX = 1000.0


def number(low: float, high: float):
    """An argparse type: a finite float in [low, high]."""

    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
        if not math.isfinite(value):
            raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
        if not low <= value <= high:
            raise argparse.ArgumentTypeError(f"{text} is out of range; expected {low:g} to "
                                             f"{high:g}")
        return value

    return parse


def integer(low: int, high: int):
    """An argparse type: an int in [low, high]."""

    def parse(text: str) -> int:
        try:
            value = int(text, 10)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if not low <= value <= high:
            raise argparse.ArgumentTypeError(f"{text} is out of range; expected {low} to "
                                             f"{high}")
        return value

    return parse


def check_out_dir(path: str | Path, option: str = "--out") -> Path:
    """``path`` when it is, or can become, a folder this process can write in; BadInput
    naming ``option`` otherwise. Nothing is created here."""
    folder = Path(path)
    text = str(path)
    if not text.strip() or "\0" in text:
        raise BadInput(f"{option} {text!r}: not a folder name")
    probe = folder
    try:
        while not probe.exists():
            if probe.is_symlink():
                raise BadInput(f"{option} {text}: {probe} is a dangling link")
            if probe.parent == probe:
                break
            probe = probe.parent
        if probe.exists() and not probe.is_dir():
            where = "is a file" if probe == folder else f"lies inside {probe}, which is a file"
            raise BadInput(f"{option} {text}: {where}; give a folder for the run folders")
        if not os.access(probe, os.W_OK | os.X_OK):
            raise BadInput(f"{option} {text}: {probe} cannot be written to by this user; "
                           "give a folder you can write in")
    except OSError as exc:
        raise BadInput(f"{option} {text}: cannot be used as a folder ({exc.strerror or exc})"
                       ) from None
    return folder


def add_visa_library(parser: argparse.ArgumentParser) -> None:
    """``--visa-library PATH``: the VISA library for instruments whose plan names no
    backend or "@ivi" (a plan itself can never name one)."""
    parser.add_argument("--visa-library", metavar="PATH",
                        help="VISA library (shared object) for instruments whose plan gives "
                        "backend \"@ivi\" or none; default: $PNBENCH_VISA_LIBRARY, then "
                        "visa_library in ~/.config/pnbench/config.toml, else @py")
