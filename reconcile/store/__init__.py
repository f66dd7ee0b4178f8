"""The append-only session store and the session commands over it."""
