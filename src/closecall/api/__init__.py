"""The library surface: :class:`closecall.Study` and the frozen results it returns.

Notebooks, the command line and the review screen all go through it (docs/library.md).
"""
