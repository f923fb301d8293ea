"""The Lagwise Dash application (imports engine; the engine never imports this)."""


def create_app(*args, **kwargs):
    from .main import create_app as _create
    return _create(*args, **kwargs)
