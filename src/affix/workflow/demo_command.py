"""affix demo (being built)."""


def register(sub):
    sub.add_parser("demo", help="(being built)")
