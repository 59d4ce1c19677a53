"""wheel_dr.sim."""
