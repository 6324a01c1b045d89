"""Fulcrum's browser app (Streamlit). Reads widgets, calls ``core``, draws; no statistics here."""
