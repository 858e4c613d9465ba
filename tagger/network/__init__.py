"""The network: recurrent cells, the residual bidirectional encoder, the CRF, the tagger network
and its builder, tensors from sentences, and the single-file model format.

May import `tagger.config`, `tagger.text`, `tagger.data`; the first stage that imports torch.
"""
