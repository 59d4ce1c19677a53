"""The demo: the invented Quokka cart of the Ferncliff Seed Bank, its scenarios and URDF (demo-only numbers).

Import the parts directly (``wheel_dr.demo.quokka``, ``wheel_dr.demo.scenarios``); this package
file imports nothing, so the simulator may take the cart's defaults from ``demo.quokka``.
"""
from __future__ import annotations
