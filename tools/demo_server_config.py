"""Jupyter server configuration for `make demo` (loaded by tools/demo_server.py via --config).

It is loaded on top of the user's own configuration (~/.jupyter is read, never written) and
turns off the two JupyterLab features that run yarn (jlpm) from the page: the demo installs no
extensions and never rebuilds JupyterLab, because the widget's front end ships prebuilt.
"""

c = get_config()  # noqa: F821 (traitlets defines get_config while it loads this file)

# The "pypi" manager offers to pip-install extensions from the page; the demo needs none.
c.LabApp.extension_manager = "readonly"

# No "Build recommended" check on page load and no build button ("Disabling Rebuild Checks"
# in JupyterLab's user guide, Advanced Usage; the guide still says LabApp, but JupyterLab 4
# warns that the setting has moved to ServerApp). The check asks yarn for its configuration.
# This replaces, for the demo only, any tornado_settings the user's own configuration sets.
c.ServerApp.tornado_settings = {"page_config_data": {"buildCheck": False, "buildAvailable": False}}
