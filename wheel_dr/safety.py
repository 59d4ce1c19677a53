"""The one safety caution of wheel_dr, shown by the command line, the report page, the node and the README."""
from __future__ import annotations

__all__ = ["SAFETY_TEXT"]

# The README quotes this text word for word (test/test_docs.py checks it); change both together.
SAFETY_TEXT = ("Wheel odometry is not a safety function. The pose, its covariance and the slip flags are advisory "
               "inputs to navigation, never a substitute for a safety-rated stop or protective field. For "
               "driverless industrial trucks see ISO 3691-4:2020, for personal care robots ISO 13482:2014; defer "
               "to local codes and to the machine's own safety assessment. Try new settings in a clear area with "
               "an emergency stop at hand.")
