"""The ``fractalseq`` command line (typer).  Parsing and formatting only; the math lives in the library."""
