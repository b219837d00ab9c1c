"""Data: pyvisa-sim YAML files and simulated-device files for the simulated bench."""
