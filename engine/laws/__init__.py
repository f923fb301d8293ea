"""Reference laws: the distributions t and Wald statistics are referred to (normal, Student t,
EWC's t and F, the fixed-b laws from the shipped simulation)."""
