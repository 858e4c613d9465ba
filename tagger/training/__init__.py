"""Training: preparing the data, the training step, the loop, checkpoints and resuming.

May import `tagger.apply` (to score dev and save the model) and everything below it.
"""
