"""The analyses a recipe can name, run over a run folder or a standalone output folder."""
