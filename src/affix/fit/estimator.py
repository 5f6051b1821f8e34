"""(being built)"""


def fit(*args, **kwargs):
    raise NotImplementedError
