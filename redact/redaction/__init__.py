"""Deciding what to obscure and obscuring it: regions, styles, plans, review flags, the independent audit."""
