"""affix quantize (being built)."""


def register(sub):
    sub.add_parser("quantize", help="(being built)")
