"""Readers and writers: the only part of flyover that opens files."""
