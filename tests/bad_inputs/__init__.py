"""The bad-input corpus: case definitions (make_cases.py) built into a temporary folder at
test time.  See docs/bad_inputs.md."""
