"""The terminal UI (Textual): live harmonic bars, the string, parameters, presets.

Entry point: :func:`rtvoice.ui.app.run_ui`, called by ``rtvoice play`` with a
started engine link. Nothing below the UI layer imports from here.
"""
