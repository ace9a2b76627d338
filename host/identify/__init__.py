"""Machine identification: from nameplate and commissioning test records to a machine config.

Owns: reading test records (records.py), the fits of each standard test (fits.py), the
nameplate estimate (nameplate.py), the combining step that writes a machine TOML with the
origin of every value (build.py), fit plots (plots.py), and synthetic test records made by
running dcrig's own model (simulate.py, for tests and demo data).

Runs once, offline, in Python with numpy only (no scipy at run time). Never imports the
step kernel except in simulate.py, which drives it through host.sim like any other run.
"""
