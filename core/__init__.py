"""kipup.core: robot models, rigid-body dynamics, optimization, simulation, export and the command line.

Never imports :mod:`kipup.widgets`.
"""
__version__ = "0.1.0"
