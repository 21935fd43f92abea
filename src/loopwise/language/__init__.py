"""The `.loop` language: parsing and name resolution."""
