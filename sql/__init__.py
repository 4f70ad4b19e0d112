"""Readable SQL templates, written against the logical warehouse contract."""
