"""affix emit (being built)."""


def register(sub):
    sub.add_parser("emit", help="(being built)")
