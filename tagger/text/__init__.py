"""Text and features: raw text to sentences and tokens with offsets, lexicons, the per-token
features a model reads, vocabularies and word vectors.

May import `tagger.data`; never torch.
"""
