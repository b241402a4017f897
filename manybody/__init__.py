"""manybody: physics from randomized measurements (classical shadows) of many-body states."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("manybody")
except PackageNotFoundError:  # running from a source tree
    __version__ = "0.1.0"
