"""The simulated bench: clock-driven physics, wire-protocol servers and the simulated camera."""
