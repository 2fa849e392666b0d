"""The bundled demo: the generator of the invented rig logs and the demo pipeline files.

``ident.demo.generate`` writes the three demo logs and ``truth.json`` (the same bytes as the
repository's ``sample_data/``); ``ident/demo/pipelines/`` holds the demo pipeline files (the
same as the repository's ``pipelines/``). ``rigfit demo`` uses both, so it runs from any folder.
"""
