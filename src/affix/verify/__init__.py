"""Verify: build and run emitted code, compare bit for bit with the integer reference."""
