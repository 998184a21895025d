"""Stage 2's readers: each turns one kind of data file into a frame of cells indexed as the user sees rows.

``text`` finds a CSV file's encoding, ``csv`` reads CSV files (whole or streamed), ``excel`` and ``parquet``
read those formats, ``common`` holds what they share (header names in Unicode normal form C, file errors).
Nothing here imports ``reportgen.data``; ``data`` builds the table and the pairs from what these return.
"""
