"""Publish: the registry of immutable, semantically versioned coefficient files.

``registry`` publishes (``registry_commit``: the staged, locked commit;
``registry_index``: the index and its checks); ``verify`` checks a file or a registry and
reproduces a fit from its provenance; ``diff`` says what changed between two files.
"""
