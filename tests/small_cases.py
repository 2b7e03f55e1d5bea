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
