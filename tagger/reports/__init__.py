"""Plain-text presentation: every table and report layout the commands print, and the one table
renderer and number style they share (`tagger.reports.layout`).

Reports read the plain dicts the library returns (check, convert, score, evaluate) and only lay
them out; nothing here counts or reads files. Never imports torch.
"""
