"""Part of the bendwise Textual app."""
