"""uqreport: defensible uncertainty statements for bench kinetics and stirred-tank studies."""

__version__ = "0.1.0"
