"""Emit: C and MicroPython source from a plan, rendered from codegen_templates/."""
