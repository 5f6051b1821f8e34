"""affix fit (being built)."""


def register(sub):
    sub.add_parser("fit", help="(being built)")
