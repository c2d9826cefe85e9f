"""Invented demo and known-truth campaigns."""
