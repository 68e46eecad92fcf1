"""What each command does, one module a command group: read files into typed inputs, call
:mod:`balltraj.pipeline` (or the calibration, library and report layers), write files, return the
text to print. The CLI (:mod:`balltraj.cli`) parses options into SI values and prints that text.

Groups: :mod:`.fit` (balls, simulate, fit), :mod:`.video` (track, analyze, render),
:mod:`.calibrate` (board, lens, scene, triangulate), :mod:`.library` (batch and the library
commands), :mod:`.report`, :mod:`.demo`; console tables live in :mod:`.text`.
"""
