"""Reading and checking data: input (`io`, `atomic` for output), column files (`corpus`,
`column_lines`), tagging schemes (`schemes`), the `check` analysis (`check`, `coverage`,
`findings`) and scheme conversion (`convert`).

Imports only `tagger.errors`; never torch, so checking and converting files starts in well under
a second.
"""
