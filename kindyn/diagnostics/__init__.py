"""Diagnostics: what is measured (energy, spectra, growth rates, resolution, eigenmodes, test fields).

"When to measure" lives in :mod:`kindyn.run`; these modules are pure functions of the data.
"""
