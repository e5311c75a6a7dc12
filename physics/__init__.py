"""Physics stage: trajectory → plateau, terminal velocity, viscosity, uncertainty.

Never imports :mod:`tracker`. Works on arrays or a DataFrame with the trajectory columns.
"""
