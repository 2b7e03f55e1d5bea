"""One module per ``kindyn`` command (see :mod:`kindyn.cli`)."""
