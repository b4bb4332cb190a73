"""Simulated board and radio link for the demo and the tests (invented data)."""
