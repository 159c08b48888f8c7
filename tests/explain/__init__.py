"""Tests of the explanation room."""
