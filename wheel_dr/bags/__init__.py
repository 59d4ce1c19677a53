"""wheel_dr.bags."""
