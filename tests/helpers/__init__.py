"""Plain helpers of the tests (no fixtures; those are in the conftest.py files).

``oracle``   an independent few-line implementation of the physics, a second opinion;
``runs``     the invented scenario and ``simulate_run`` shared by the fit and stage-1 tests;
``hostile``  hypothesis settings, file digests and the one-line error check of the hostile tests;
``commands`` ``run_command``: a ``fringe`` command run in a folder of its own, as a user would.
"""
