"""The review screens behind ``closecall review`` (Textual).

One screen or widget per module; styles in ``review.tcss``. Every action a reviewer takes
calls the same engine function as the command line (``closecall.review.decisions``).
"""
