"""Suite-wide test settings.

No test is ever rerun: a test that fails only sometimes is a defect to fix.

Tests marked ``realtime`` run the daemon and the simulated rig on the wall
clock with the default timeouts (a starved process trips its watchdogs, as on
a real rig). They run on their own, after the rest (the README's test command:
``pytest -n 2 -m "not realtime"``, then ``pytest -m realtime``), so the suite's
own parallel load is not what they measure; the shared machine's load still is.
"""
