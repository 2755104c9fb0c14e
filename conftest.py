"""Root conftest: load synthgen's pytest plugin when the package is not installed.

Installed (``pip install -e .``), the plugin arrives through its ``pytest11``
entry point, exactly as it does in other projects.
"""

from importlib.metadata import entry_points

if not any(ep.value == "synthgen.testing" for ep in entry_points(group="pytest11")):
    pytest_plugins = ["synthgen.testing"]
