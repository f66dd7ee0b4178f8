"""The analyses as the CLI, the report and the demo run them, one after another."""
