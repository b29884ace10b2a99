"""labtool: startup characterisation of self-biased references on the bench."""

__version__ = "0.1.0"
