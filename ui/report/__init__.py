"""The run report: its summary (`summary`), matplotlib figures (`plots`), HTML page
(`html`) and multi-page PDF (`pdf`); ``ui.commands.report`` puts them together.
matplotlib is imported only inside the plotting functions."""
