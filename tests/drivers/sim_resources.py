"""Resource names of sim_configs/protocol_bench.yaml, shared by the driver tests."""

SMU = "TCPIP0::192.0.2.11::5025::SOCKET"
LCR = "TCPIP0::192.0.2.12::5025::SOCKET"
BROKEN_SMU = "TCPIP0::192.0.2.13::5025::SOCKET"
