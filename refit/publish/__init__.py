"""Publish: the registry of immutable, semantically versioned coefficient files.

``registry`` publishes (``registry_layout``: the folder's constants and the index reader;
``registry_commit``: the staged, locked commit and recovery; ``registry_index``: the
index's checks); ``verify`` checks a file or a registry and
reproduces a fit from its provenance; ``diff`` says what changed between two files.
"""
