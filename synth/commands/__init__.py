"""Bodies of the ``synth`` commands: each takes parsed options, calls the library and returns a
JSON-ready summary; `synth.cli` parses and formats.
"""
