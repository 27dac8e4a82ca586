"""Core layer: bands, spectral types, the solver, flags, distance conversions,
random draws, number formatting, option declarations and the user-error type.
Imports nothing from the other layers of specpar."""
