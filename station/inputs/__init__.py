"""The input files a run reads: station file, UUT file, geometry file."""
