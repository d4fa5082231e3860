"""System descriptions the tests share (imported by test modules; not a conftest.py)."""

#: A 12.8 V, 200 Ah LiFePO4 bank in western Norway: the smallest complete system.toml.
OSLO_LFP_SYSTEM = """
[site]
latitude_deg = 61.2
longitude_deg = 7.1
timezone = "Europe/Oslo"
[battery]
chemistry = "lifepo4"
nominal_voltage_V = 12.8
rated_capacity_Ah = 200
rated_hours = 20
"""
