"""Quantise: the fixed-point plan, its overflow proof and accuracy budget."""
