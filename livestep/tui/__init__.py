"""The terminal UI of ``livestep watch`` (textual): the app, its views and the braille plot."""
