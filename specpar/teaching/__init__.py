"""Teaching: worked solutions (answer keys) and invented problem sets."""
