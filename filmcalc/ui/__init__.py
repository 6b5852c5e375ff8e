"""Streamlit pages. The only part of filmcalc that imports Streamlit."""
