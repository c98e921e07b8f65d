"""Generators of test cases shared by several test modules (simulated sweeps with known truth,
coverage bookkeeping). Test modules import from here, never from each other."""
