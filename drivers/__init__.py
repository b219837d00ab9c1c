"""SCPI text, dialects, pyvisa sessions, instrument roles and the simulated bench."""
