"""wheel_dr.report."""
