"""The cell's files: arm files, taught points, programs and their dry runs, safe saving."""
