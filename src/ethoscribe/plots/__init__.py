"""Plotly figure builders, one module per topic; they take tables and arrays, hold no science."""
