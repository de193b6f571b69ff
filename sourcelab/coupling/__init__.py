"""Coupling between electrode pairs and between cortical networks (pure array functions)."""
