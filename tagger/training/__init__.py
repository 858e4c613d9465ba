"""Training: preparing the data, the training step, the loop, checkpoints and resuming.

    data.py        the sentences (from files or memory), the held-out dev set, the data fingerprint
    setup.py       vocabularies, features, encoded sentences, the network, optimizer, step tools
    step.py        `train_step`: one batch of training, in named phases
    averaging.py   the moving average of the weights (torch's AveragedModel, our ramp)
    schedule.py    the learning-rate schedule (torch's schedulers)
    budget.py      the wall clock: train.max_minutes and the time-left estimate
    checkpoint.py  saving and restoring a run after its last finished epoch
    events.py      the progress events the command line reads
    overview.py    what a run says before its first epoch (sizes, stopping rule, warnings)
    records.py     the run folder's file names; README.txt, resolved-config.toml, epochs.json/.csv
                   and outcome.json
    run_folder.py  starting a run: named files readable, the folder made, held and checked
    loop.py        `train` (files) and `train_on_sentences` (memory): the epochs

May import `tagger.apply` (to score dev and save the model) and everything below it.
"""
