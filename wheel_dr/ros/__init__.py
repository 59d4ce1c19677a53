"""wheel_dr.ros."""
