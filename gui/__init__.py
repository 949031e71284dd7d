"""Loopwright desktop app (PySide6). See loopwright.gui.app.run_app."""
