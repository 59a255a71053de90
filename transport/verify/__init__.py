"""Verification: published closed forms (``closed_forms``), the cases (``cases``) and
the report of ``stratiflux verify`` (``report``).
"""
