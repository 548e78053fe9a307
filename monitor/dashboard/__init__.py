"""The Textual dashboard shown by ``tankside watch`` (one file per widget)."""
