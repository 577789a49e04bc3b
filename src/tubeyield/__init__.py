"""tubeyield: operating windows for tubular reactors running series and parallel reactions."""

__version__ = "0.1.0"
