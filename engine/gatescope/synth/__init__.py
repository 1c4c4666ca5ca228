"""Synthetic experiments and lab planning, built on the pipeline.

* `noise` — known channels: noise kinds, random channels, SPEC strings;
* `simulate` — synthetic experiments of a known channel, with its truth;
* `plan` — the run sheet: wave-plate angles of every (prep, meas) pair.
"""
