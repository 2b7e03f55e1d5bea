"""Case files: TOML -> validated frozen :class:`Case` (see :mod:`kindyn.case.load`)."""

from kindyn.case.load import Case, load_case, parse_override

__all__ = ["Case", "load_case", "parse_override"]
