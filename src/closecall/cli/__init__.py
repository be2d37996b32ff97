"""Command-line interface: thin typer commands over the engine."""
