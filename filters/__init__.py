"""Filter design and streaming for tunetrace: numpy/scipy only, no I/O, no UI."""
