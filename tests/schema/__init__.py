"""Tests of taprig.schema, the daemon↔client contract."""
