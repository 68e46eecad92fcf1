"""balltraj: what a thrown, pitched, kicked or struck ball really did, from practice video."""

__version__ = "0.1.0"
