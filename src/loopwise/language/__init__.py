"""The `.loop` language: reading model files (`source`), parsing (`parse`, `tables`),
the included files (`includes`) and name resolution (`resolve`, `evaluate`) into a
resolved `model`."""
