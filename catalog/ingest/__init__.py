"""Reading campaign sources and validating their typed values (pure, no SQL)."""
