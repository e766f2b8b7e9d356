"""Numerical core of exomap: plain SI dataclasses in, frozen result dataclasses out.

Imports only the standard library, numpy and scipy (a test enforces it). Public entry points are imported
lazily by their own modules; this package file does no work at import time.
"""
