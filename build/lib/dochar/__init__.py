"""dochar: experiment harness for graph neural networks that label the words of semi-structured documents."""

__version__ = "0.1.0"
