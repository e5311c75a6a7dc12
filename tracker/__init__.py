"""Tracking stage: clip → trajectory (pixels → millimetres, container time → seconds).

See DEVELOPERS.md for the trajectory column contract.
"""
