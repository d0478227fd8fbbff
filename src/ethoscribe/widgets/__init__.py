"""The Jupyter workbench: thin ipywidgets + plotly bindings over the library."""
