"""The test-field method: alpha and eta (beta) tensors of a prescribed flow, beside SOCA.

For prescribed mean "test" fields ``B_T`` the fluctuation ``b`` solves (Schrinner et al. 2005,
Astron. Nachr. 326, 245; Schrinner et al. 2007, Geophys. Astrophys. Fluid Dyn. 101, 81)::

    db/dt = curl( (u x B_T)' ) + curl( (u x b)' ) + eta Lap b,     b(0) = 0,     <b> = 0,

where ``<.>`` is the average (box or planes) and ``f' = f - <f>``, and the mean electromotive
force ``Ebar = <u x b>`` gives the coefficients in (design.md section 1)::

    Ebar_i = alpha_ij Bbar_j + beta_ijk d_k Bbar_j,
    Ebar_i = alpha_ij Bbar_j - eta_ij (curl Bbar)_j           (planar averages).

SOCA (second-order correlation approximation) drops ``curl((u x b)')``. SOCA is valid only at
small Rm or short correlation time; above dynamo onset the full coefficients of a time-dependent
flow depend on the interval at which the test solutions are reset.

Modules: :mod:`.settings` (the ``[testfield]`` case keys), :mod:`.fields` (test fields and
averages), :mod:`.problems` (right-hand sides), :mod:`.steady` (direct steady solves),
:mod:`.extraction` (EMF -> tensors), :mod:`.averaging` (time integration, blocks, resets),
:mod:`.kernels` (Lorentzian fits in K), :mod:`.closure` (mean-field growth rate),
:mod:`.calibration` (everything for one case). This package file imports nothing so that the case
loader can read :mod:`.settings` cheaply.
"""
