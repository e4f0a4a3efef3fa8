"""The report of one finished run: read the run folder, render one self-contained HTML file."""
