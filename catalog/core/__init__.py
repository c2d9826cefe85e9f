"""The pure physics and statistics: numpy in SI units, no I/O."""
