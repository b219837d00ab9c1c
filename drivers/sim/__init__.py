"""The simulated bench: a diode and an SMU and LCR meter serving SCPI on loopback."""
