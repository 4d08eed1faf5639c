"""Physical constants (SI)."""

C0 = 299_792_458.0  # speed of light in vacuum, m/s (exact, SI definition)
