"""Bench side of labtool: IEEE 488.2 / SCPI parsing, PyVISA sessions, command profiles, role drivers,
acquisition plans and the simulated bench."""
