"""The gapwatch dashboard (Streamlit): run it with ``gapwatch dashboard``."""
