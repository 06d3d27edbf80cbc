"""icgen: initial conditions, schedules and run checks for cosmological N-body simulations."""
__version__ = "0.1.0"
