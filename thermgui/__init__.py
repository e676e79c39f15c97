"""Desktop front end and command line for enclosure thermal transients (numerics live in ``solver``)."""
from solver import __version__

__all__ = ["__version__"]
