"""Small case files that several test modules share (text, so that each test writes its own file).

``DECAYING_ABC``: the 1:1:1 ABC flow (k = 1) on 8^3 at Rm = 4 with the initial field equal to the
flow. For B = u, u x B = 0 and Lap u = -u, so the field decays exactly as ``exp(-eta t)`` with
eta = 1/Rm (derived): a run of it takes a second and has a known answer, gamma = -1/4.
"""

DECAYING_ABC = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = 4.0
initial_field = "flow"
[numerics]
planning = "estimate"
"""

NO_FIGURE = """\
[output]
figure = false
"""

# The ABC flow on 8^3 at Rm = 3 (below its first window: the leading mode decays) from a seeded
# random field: the run of the checkpoint, kill and resume tests (each adds its [run], [numerics]
# and [output] sections).
SEEDED_ABC = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = 3.0
seed = 11
"""

# A renovating random helical flow (one shell k = 1, fully helical, tau = 2) on an n^3 grid
# (``.format(n=...)``) with sinusoidal test fields at K = 1; [testfield] comes last, so a test may
# append keys of that section.
RENOVATING_HELICAL = """\
[domain]
grid = [{n}, {n}, {n}]
[flow]
type = "random-helical"
spectrum = "shell"
k_min = 1.0
k_max = 1.0
sigma = 1.0
u_rms = 1.0
seed = 11
time_dependence = "renovating"
tau = 2.0
renewal = "shift"
[magnetic]
eta = 0.5
[testfield]
modes = [1]
samples_per_period = 8
"""
