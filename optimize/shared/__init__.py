"""Shared by every stage: the atomic writer, figure style and the figures of one stack."""
