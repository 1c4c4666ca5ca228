"""Synthetic experiments (gatescope.synth.simulate): reproducible counts and the truth.
"""

from __future__ import annotations

from gatescope.cli import main


def test_same_seed_same_counts(tmp_path):
    for k in (1, 2):
        assert main(["simulate", "--channel", "H+depolarizing:0.1", "--seed", "9",
                     "-o", str(tmp_path / f"s{k}")]) == 0
    assert (tmp_path / "s1" / "counts.csv").read_bytes() == (tmp_path / "s2" / "counts.csv").read_bytes()
