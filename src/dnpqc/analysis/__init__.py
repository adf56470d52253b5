"""What the results mean: peaks and verdicts, co-design and shot plans, measured counts and
their mitigation."""
