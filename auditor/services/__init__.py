"""Use cases: the only layer that touches both the store and the computation.

The CLI and the web dashboard call these functions and render the plain dicts they return.
"""
