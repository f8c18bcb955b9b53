"""The edge of the program: every path opened and every GDAL call lives in this package."""
