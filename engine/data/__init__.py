"""Data: reading files into validated tables, transforms, dates, the columns a fit uses and
panel identifiers. The bottom layer: it imports nothing else of the engine but its errors."""
