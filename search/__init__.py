"""The budgeted, cross-validated search built on the tinyconv engine."""
