"""Emit: C and MicroPython source from a plan, rendered from codegen_templates/."""

# The choices of 'affix emit', here so the CLI can offer them without
# loading the renderers.
MANIFEST_FORMAT = "affix.manifest/1"
MANIFEST_SUFFIX = ".manifest.json"  # NAME.manifest.json, one per estimator in an emit folder
LANGUAGES = ("c", "micropython")
ARITHS = ("int", "float32")
STYLES = ("table", "unrolled")
