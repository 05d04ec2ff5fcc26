"""Estimators and controllers the daemon runs every sample, and their design.

Design-time code (LQR, Kalman gains, margins, reports) uses numpy and scipy;
everything called per sample (``update``) takes and returns plain floats.
Angle convention: DEVELOPERS.md (theta = 0 upright, pi hanging, positive
counter-clockwise seen from the front); balance works on theta wrapped to
(-pi, pi].
"""
