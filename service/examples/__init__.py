"""Example questions (package data): invented Northbridge General Hospital studies; see README.md."""
