"""File input and output: rig logs, model files, pipeline files.

This layer may use pandas; the numeric core never imports it.
"""
