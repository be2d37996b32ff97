"""Shared by every layer: errors, cautions, progress callbacks."""
