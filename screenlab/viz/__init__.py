"""Plotly figure builders for the app and reports (no Streamlit import)."""
