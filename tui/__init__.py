"""Text interface for trackframe (Textual). Calls the same pipeline as the CLI."""
