"""The invented sample town of Corvane (data files; see README.md here)."""
