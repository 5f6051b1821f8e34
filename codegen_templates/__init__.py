"""jinja2 templates for every emitted language (packaged as affix.codegen_templates)."""
