"""A plain double-precision C version of the demodulator chain, written the way a user would by hand:
the baseline the emitted integer C is benchmarked against (not emitted, not a template)."""
