"""Reports built from result and bench files.

* `plots` — the figures (matplotlib, the optional ``plot`` extra): the one
  module that imports matplotlib, with a non-interactive backend.
"""
