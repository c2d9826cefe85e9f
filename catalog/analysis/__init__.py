"""From stored trials to figures, flags and rankings (orchestrates the core)."""
