"""File-level steps that join the layers: build a table from a file, golden vectors, facts about maps and
tables, verify a map into a folder, and batches of many maps."""
