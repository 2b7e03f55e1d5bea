"""Pieces shared by the commands: common options, case loading, JSON printing, progress lines."""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

from kindyn.case import load_case


def add_case_arguments(parser) -> None:
    parser.add_argument("case", help="case file (TOML)")
    parser.add_argument("--out", default="kindyn-output", help="output folder (default: kindyn-output)")
    parser.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                        help="override a case key (value typed as TOML); may be repeated")
    parser.add_argument("--json", action="store_true", help="print one JSON object on stdout")


def case_from_args(args):
    return load_case(args.case, args.overrides)


def output_folder(args) -> Path:
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    return out


def print_json(obj) -> None:
    print(json.dumps(obj, default=_json_default, allow_nan=False))


def _json_default(value):
    try:
        import numpy as np

        if isinstance(value, np.ndarray):
            return value.tolist()
        if isinstance(value, (np.floating, np.integer, np.bool_)):
            return value.item()
    except ImportError:  # pragma: no cover
        pass
    return str(value)


def clean_number(x):
    """``None`` for NaN/Inf so that JSON stays valid."""
    return None if x is None or not math.isfinite(float(x)) else float(x)


def say(text: str) -> None:
    """A line for the human on stderr (stdout is kept for --json)."""
    print(text, file=sys.stderr, flush=True)
