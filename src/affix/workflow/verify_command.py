"""affix verify (being built)."""


def register(sub):
    sub.add_parser("verify", help="(being built)")
