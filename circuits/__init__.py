"""Generic d-level qudit register circuits (no gauge-theory knowledge)."""
