"""The version of Arrhenia (one place; the package and every manifest read it here)."""

__version__ = "0.1.0"
