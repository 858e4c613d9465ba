"""tagger: train, evaluate and run bidirectional recurrent sequence taggers on CPUs."""

__version__ = "0.1.0"
