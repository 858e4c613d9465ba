"""Character language models learnt from unannotated text: they learn (held-out perplexity below a
unigram model's, computed here), a stopped run resumes exactly, the model file checks what it
reads, and a tagger that reads one tags the same after saving and loading."""

from __future__ import annotations

import math
import random
from pathlib import Path

import pytest
import torch

from tagger.apply.tagger import Tagger
from tagger.config import config_from_dict
from tagger.data.corpus import Sentence
from tagger.errors import ConfigError, DataError, ModelFileError
from tagger.network.char_lm import CharLanguageModel
from tagger.network.net import build_net
from tagger.network.shapes import char_lm_tensor_count, char_lm_tensors
from tagger.text.char_context import BOUNDARY, CharLMSpec
from tagger.text.tokenizer import TokenizerSettings
from tagger.training.loop import train_on_sentences
from tagger.unannotated.char_lm_file import load_char_lm, save_char_lm
from tagger.unannotated.char_lm_training import (
    CharLMSettings,
    learn_char_lm,
    resume_path,
    unigram_perplexity,
)

PARTS = ["pump", "valve", "gearbox", "bearing", "blade"]
FAULTS = ["leaking", "seized", "cracked", "worn"]


def raw_text(sentences: int, seed: int = 2) -> str:
    rng = random.Random(seed)
    return "".join(
        f"The {rng.choice(PARTS)} on unit {rng.randint(1, 9)} was {rng.choice(FAULTS)} .\n"
        for _ in range(sentences)
    )


SMALL = CharLMSettings(
    hidden_size=24, char_dim=8, seq_len=60, batch_size=8, epochs=2, learning_rate=5.0, dropout=0.0
)


def test_the_encoding_marks_boundaries_and_each_tokens_first_and_last_character() -> None:
    spec = CharLMSpec(list("Crew B."))
    ids, starts, ends = spec.encode(["Crew", "B."])
    assert ids[0] == ids[-1] == BOUNDARY and len(ids) == 1 + len("Crew B.") + 1
    assert [ids[i] for i in starts] == spec.char_ids("CB")
    assert [ids[i] for i in ends] == spec.char_ids("w.")


def test_the_unigram_baseline_is_the_perplexity_of_character_frequencies() -> None:
    # worked by hand: training ids 1,3,3,4,1 in a vocabulary of ids 0-4 (0 padding, never
    # predicted) with one added to every other count: 1 -> 3, 2 -> 1, 3 -> 3, 4 -> 2 of 9.
    # The held-out row 1,3,4 predicts 3 and 4 left to right, 1 and 3 right to left.
    train, held = pieces_of([1, 3, 3, 4, 1]), pieces_of([1, 3, 4])
    nll = -(math.log(3 / 9) + math.log(2 / 9)) - (math.log(3 / 9) + math.log(3 / 9))
    assert unigram_perplexity(train, held, 5) == pytest.approx(math.exp(nll / 4))


def pieces_of(ids: list[int]):
    import numpy as np

    return np.asarray([ids], dtype=np.int64)


def test_the_language_model_learns_below_the_unigram_baseline(tmp_path: Path) -> None:
    (tmp_path / "raw.txt").write_text(raw_text(400), encoding="utf-8")
    torch.manual_seed(0)
    learnt = learn_char_lm(
        [tmp_path / "raw.txt"], tmp_path / "lm.tagclm", SMALL, input_format="sentence-lines"
    )
    assert learnt["held_out_perplexity"] < 0.7 * learnt["unigram_perplexity"]
    assert not resume_path(tmp_path / "lm.tagclm").exists()  # a finished run leaves none
    model, meta, _ = load_char_lm(tmp_path / "lm.tagclm")
    assert meta["learnt"]["held_out_perplexity"] == learnt["held_out_perplexity"]
    assert " " in model.spec.chars


def test_a_stopped_run_resumes_to_the_same_weights(tmp_path: Path) -> None:
    (tmp_path / "raw.txt").write_text(raw_text(150), encoding="utf-8")
    settings = CharLMSettings(**{**SMALL.__dict__, "dropout": 0.3, "checkpoint_minutes": 0.0})
    learn_char_lm([tmp_path / "raw.txt"], tmp_path / "whole.tagclm", settings)
    seen = []

    def interrupt(event: dict) -> None:
        if event["event"] == "batch":
            seen.append(event)
            if len(seen) == 7:
                raise KeyboardInterrupt

    out = tmp_path / "stopped.tagclm"
    with pytest.raises(KeyboardInterrupt):
        learn_char_lm([tmp_path / "raw.txt"], out, settings, progress=interrupt)
    assert resume_path(out).exists() and not out.exists()
    learn_char_lm([tmp_path / "raw.txt"], out, settings, resume=True)
    whole, _, _ = load_char_lm(tmp_path / "whole.tagclm")
    resumed, _, _ = load_char_lm(out)
    for key, tensor in whole.state_dict().items():
        assert torch.equal(tensor, resumed.state_dict()[key]), key


def test_resuming_with_other_settings_or_nothing_to_resume_is_refused(tmp_path: Path) -> None:
    (tmp_path / "raw.txt").write_text(raw_text(20), encoding="utf-8")
    with pytest.raises(DataError, match="nothing to resume"):
        learn_char_lm([tmp_path / "raw.txt"], tmp_path / "x.tagclm", SMALL, resume=True)
    stopped = CharLMSettings(**{**SMALL.__dict__, "checkpoint_minutes": 0.0})

    def interrupt(event: dict) -> None:
        if event["event"] == "batch" and event["done"] > 0.3:  # after a state was saved
            raise KeyboardInterrupt

    out = tmp_path / "y.tagclm"
    with pytest.raises(KeyboardInterrupt):
        learn_char_lm([tmp_path / "raw.txt"], out, stopped, progress=interrupt)
    with pytest.raises(ConfigError, match="other settings"):
        wider = CharLMSettings(**{**stopped.__dict__, "hidden_size": 30})
        learn_char_lm([tmp_path / "raw.txt"], out, wider, resume=True)
    # the time budget and the threads may change: they do not change what is learnt
    longer = CharLMSettings(**{**stopped.__dict__, "max_minutes": 90.0, "threads": 2})
    learn_char_lm([tmp_path / "raw.txt"], out, longer, resume=True)
    assert out.exists() and not resume_path(out).exists()


def test_a_damaged_or_foreign_file_is_one_line_naming_it(tmp_path: Path) -> None:
    spec = CharLMSpec(list("ab "), char_dim=2, hidden_size=3)
    save_char_lm(tmp_path / "lm.tagclm", CharLanguageModel(spec), {}, {})
    blob = (tmp_path / "lm.tagclm").read_bytes()
    (tmp_path / "cut.tagclm").write_bytes(blob[:-10])
    with pytest.raises(DataError) as caught:
        load_char_lm(tmp_path / "cut.tagclm")
    assert "cut.tagclm" in str(caught.value) and "\n" not in str(caught.value)
    from model_files import tiny_tagger

    tiny_tagger().save(tmp_path / "m.tagger")
    with pytest.raises(DataError, match="not a character language model file"):
        load_char_lm(tmp_path / "m.tagger")


def test_the_expected_tensors_are_those_the_model_makes() -> None:
    spec = CharLMSpec(list("abc "), char_dim=4, hidden_size=5, layers=2, cell="gru")
    made = CharLanguageModel(spec).state_dict()
    expected = char_lm_tensors("", spec.vocab_size, 4, 5, 2, "gru")
    assert {k.lstrip("."): v for k, v in expected.items()} == {
        k: (tuple(t.shape), str(t.dtype).removeprefix("torch.")) for k, t in made.items()
    }
    assert char_lm_tensor_count(2) == len(made)


# --- a tagger that reads one ----------------------------------------------------------------------

TRAIN = [
    ("The pump on unit 4 was leaking .", "O B-PART O O O O O O"),
    ("The blade on unit 2 was cracked .", "O B-PART O O O O O O"),
]


def test_a_tagger_with_a_language_model_tags_the_same_after_saving_and_loading(
    tmp_path: Path,
) -> None:
    (tmp_path / "raw.txt").write_text(raw_text(60), encoding="utf-8")
    lm = tmp_path / "lm.tagclm"
    learn_char_lm([tmp_path / "raw.txt"], lm, CharLMSettings(**{**SMALL.__dict__, "epochs": 1}))
    config = config_from_dict(
        {
            "model": {"hidden_size": 6, "word_dim": 5, "char_dim": 3, "char_features": 4},
            "train": {"epochs": 2, "seed": 1},
        }
    )
    config = config_from_dict(
        {**config.to_dict(), "model": {**config.to_dict()["model"], "char_lm": str(lm)}}
    )
    sentences = [Sentence.from_tokens(t.split(), labels.split()) for t, labels in TRAIN * 5]
    result = train_on_sentences(sentences, sentences[:2], config, tmp_path / "run")
    tagger = Tagger.load(result.run_dir / "model.tagger")
    stored, _, _ = load_char_lm(lm)
    for key, tensor in stored.state_dict().items():  # frozen: the tagger holds it unchanged
        assert torch.equal(tagger.net.char_lm.model.state_dict()[key], tensor), key
    texts = [["The", "valve", "on", "unit", "7", "was", "worn", "."]]
    tagger.save(tmp_path / "again.tagger")
    again = Tagger.load(tmp_path / "again.tagger")
    assert again.predict_scored_spans(texts) == tagger.predict_scored_spans(texts)


def test_a_language_model_learnt_with_other_tokenizer_settings_is_refused(tmp_path: Path) -> None:
    spec = CharLMSpec(list("ab "), char_dim=2, hidden_size=3)
    save_char_lm(
        tmp_path / "lm.tagclm",
        CharLanguageModel(spec),
        TokenizerSettings(split_hyphens=True).to_dict(),
        {},
    )
    config = config_from_dict({"model": {"char_lm": str(tmp_path / "lm.tagclm")}})
    sentences = [Sentence.from_tokens(t.split(), labels.split()) for t, labels in TRAIN]
    with pytest.raises(DataError, match="tokenizer setting split_hyphens"):
        train_on_sentences(sentences, None, config, tmp_path / "run")


def test_a_stored_language_model_that_does_not_fit_its_weights_is_refused(tmp_path: Path) -> None:
    from model_files import rewrite, tiny_tagger

    tagger = tiny_tagger()
    tagger.vocabs.char_lm = CharLMSpec(list("ab "), char_dim=2, hidden_size=3)
    tagger.net = build_net(tagger.config, tagger.vocabs)
    tagger.save(tmp_path / "m.tagger")
    Tagger.load(tmp_path / "m.tagger")

    def wider(meta: dict) -> None:
        meta["vocabularies"]["char_lm"]["hidden_size"] = 4

    bad = rewrite(tmp_path / "m.tagger", tmp_path / "bad.tagger", wider, "fresh")
    with pytest.raises(ModelFileError) as caught:
        Tagger.load(bad)
    assert str(caught.value).startswith(f"{bad}: ") and "\n" not in str(caught.value)
