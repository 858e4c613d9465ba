"""Reading and checking data: files in and out, column files, tagging schemes, the `check` and
`convert` reports.

Imports only `tagger.errors`; never torch, so checking and converting files starts in well under
a second.
"""
