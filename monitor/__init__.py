"""tunetrace's live application: sources, framing, decoding, ring, pipeline, UI, plot."""

__version__ = "0.1.0"
