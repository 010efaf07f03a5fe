"""Depletion Desk core: pure computation (no Streamlit, no printing).

Data flows one way: file -> loader (tidy monthly table + load report) -> fluid typing
and PVT -> stage tracker -> decline engine -> forecast and economics -> result tables.
"""

__version__ = "0.1.0"
