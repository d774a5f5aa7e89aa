"""Operator tools for the service (load checks); not imported by the app."""
