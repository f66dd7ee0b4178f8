"""The least rework that restores the spec: candidates, search, yield."""
