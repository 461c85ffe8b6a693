"""The Textual console: the app, its screens, widgets, messages and styles."""
