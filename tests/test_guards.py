"""What train, evaluate and score refuse before they start (tagger.data.guards and the checks of
tagger.training.data): ill-formed labels and over-long sentences named by file and line, data a run
could not learn or choose anything from, and error messages that never echo unbounded input."""

from __future__ import annotations

from pathlib import Path

import pytest
from test_train import TINY, small_config, write_columns_file
from typer.testing import CliRunner

from tagger.cli import app
from tagger.data.check import check_files
from tagger.data.corpus import Sentence
from tagger.data.guards import MAX_SENTENCE_TOKENS, check_labels, check_length
from tagger.errors import DataError, quoted
from tagger.reports.check import format_check
from tagger.text.tokenizer import TokenizerSettings
from tagger.training.loop import train, train_on_sentences

runner = CliRunner()
GOOD = "Oil\tB-DEF\nleak\tI-DEF\nat\tO\nT-3\tB-ASSET\n\nno\tO\nfault\tO\nfound\tO\n\n"


def _long(tokens: int) -> str:
    """A file without blank lines: `tokens` lines read as one sentence."""
    return "".join(f"w{i}\t{'B-X' if i == 0 else 'O'}\n" for i in range(tokens))


def _tiny_network() -> list[str]:
    return [
        *("--set", "model.hidden_size=8", "--set", "model.layers=1", "--set", "model.word_dim=8"),
        *("--set", "model.char_encoder='none'", "--set", "train.epochs=1"),
        *("--set", "train.threads=1"),
    ]


@pytest.fixture(scope="module")
def model(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("guards")
    data = write_columns_file(folder / "train.txt", TINY)
    return train(small_config(data, data, train={"epochs": 1}), folder / "run").model_path


# Each row: the files to write (name -> text, written as NAME.txt), the command (file names in
# braces), the exit code and the one line the command prints on stderr (a fragment of it).
ROWS = [
    pytest.param(
        {"train": "Oil\tB-DEF\nleak\tI-DEF\nat\tB-\n\n", "dev": GOOD},
        ["train", "--train", "{train}", "--dev", "{dev}"],
        1,
        "{train}:3: tag 'B-' has no type after its prefix",
        id="train-label-without-type",
    ),
    pytest.param(
        {"train": GOOD, "dev": "Oil\tX-FOO\n\n"},
        ["train", "--train", "{train}", "--dev", "{dev}"],
        1,
        "{dev}:1: tag 'X-FOO' is neither O nor PREFIX-TYPE",
        id="train-unknown-prefix-in-dev",
    ),
    pytest.param(
        {"train": "no\tO\nfault\tO\n\nall\tO\nfine\tO\n\n", "dev": GOOD},
        ["train", "--train", "{train}", "--dev", "{dev}"],
        1,
        "{train}: the training labels hold no spans (every label is O), so there is no "
        "entity type to learn",
        id="train-without-spans",
    ),
    pytest.param(
        {"train": GOOD, "dev": "\n\n"},
        ["train", "--train", "{train}", "--dev", "{dev}"],
        1,
        "{dev}: the dev set holds no sentences, so dev F1 could not choose the best epoch",
        id="train-empty-dev",
    ),
    pytest.param(
        {"train": GOOD, "dev": "no\tO\nfault\tO\n\n"},
        ["train", "--train", "{train}", "--dev", "{dev}"],
        1,
        "{dev}: the dev labels hold no spans (every label is O), so dev F1 would be 0 every "
        "epoch and choose nothing",
        id="train-dev-without-spans",
    ),
    pytest.param(
        {"train": "Oil\tB-DEF\nleak\tI-DEF\n\n"},
        ["train", "--train", "{train}"],
        1,
        "{train}: no training sentence is left once dev is held out of the 1 there are",
        id="train-nothing-left-after-hold-out",
    ),
    pytest.param(
        {"train": _long(301), "dev": GOOD},
        ["train", "--train", "{train}", "--dev", "{dev}"],
        1,
        "{train}:1: a sentence of 301 tokens to line 301 is longer than "
        "data.max_sentence_tokens=300; sentences end at blank lines",
        id="train-sentence-over-the-limit",
    ),
    pytest.param(
        {"gold": "Oil\tB-DEF\nleak\tI-DEF\nat\tB-\n\n"},
        ["evaluate", "{model}", "{gold}"],
        1,
        "{gold}:3: tag 'B-' has no type after its prefix",
        id="evaluate-label-without-type",
    ),
    pytest.param(
        {"gold": GOOD + _long(301)},
        ["evaluate", "{model}", "{gold}"],
        1,
        "{gold}:10: a sentence of 301 tokens to line 310 is longer than "
        "data.max_sentence_tokens=300",
        id="evaluate-sentence-over-the-limit",
    ),
    pytest.param(
        {"gold": "Oil\tX-FOO\nleak\tO\n\n", "pred": "Oil\tO\nleak\tO\n\n"},
        ["score", "{gold}", "{pred}"],
        1,
        "{gold}:1: tag 'X-FOO' is neither O nor PREFIX-TYPE",
        id="score-bad-gold-label",
    ),
    pytest.param(
        {"gold": GOOD, "pred": GOOD.replace("I-DEF", "I-")},
        ["score", "{gold}", "{pred}"],
        1,
        "{pred}:2: tag 'I-' has no type after its prefix",
        id="score-bad-predicted-label",
    ),
    pytest.param(
        {"gold": GOOD, "pred": GOOD.replace("at\t", "by\t")},
        ["score", "{gold}", "{pred}"],
        1,
        "{gold}:3: token 'at', but {pred}:3 holds 'by'; both files must hold the same "
        "tokens in the same sentences",
        id="score-different-token",
    ),
    pytest.param(
        {"gold": GOOD, "pred": GOOD.replace("at\tO\nT-3\tB-ASSET\n", "")},
        ["score", "{gold}", "{pred}"],
        1,
        "{gold}:3: token 'at', but in {pred} the sentence has already ended (its last "
        "token is on line 2)",
        id="score-predicted-sentence-shorter",
    ),
    pytest.param(
        {"gold": GOOD.replace("at\tO\nT-3\tB-ASSET\n", ""), "pred": GOOD},
        ["score", "{gold}", "{pred}"],
        1,
        "{gold}:2: the sentence ends after this line, but {pred}:3 goes on with 'at'",
        id="score-gold-sentence-shorter",
    ),
]


@pytest.mark.parametrize(("files", "command", "code", "message"), ROWS)
def test_bad_input_is_refused_in_one_line(
    model: Path,
    tmp_path: Path,
    files: dict[str, str],
    command: list[str],
    code: int,
    message: str,
) -> None:
    names = {"model": str(model)}
    for name, text in files.items():
        names[name] = str(write_text(tmp_path / f"{name}.txt", text))
    argv = [part.format_map(names) for part in command]
    if argv[0] == "train":
        argv += ["--out", str(tmp_path / "run"), *_tiny_network()]
    result = runner.invoke(app, argv)
    assert result.exit_code == code, result.stderr
    assert result.stderr.count("\n") == 1, result.stderr  # one line, no traceback
    assert message.format_map(names) in result.stderr
    assert not (tmp_path / "run").exists()  # a refused run leaves no folder, no model


def write_text(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


# --- messages stay short ------------------------------------------------------------------------


def test_quoted_cuts_long_input_and_keeps_short_input_whole() -> None:
    assert quoted("B-PER") == "'B-PER'"
    assert quoted("x" * 60) == repr("x" * 60)
    long = quoted("y" * 5_000_000)
    assert long == repr("y" * 57) + "..." and len(long) < 70
    assert quoted(None) == "None"
    assert quoted(list(range(1000))).endswith("...") and len(quoted(list(range(1000)))) == 60


@pytest.mark.parametrize("where", ["label", "token"])
def test_a_megabyte_of_input_is_never_echoed(tmp_path: Path, where: str) -> None:
    huge = "Z" * 1_000_000
    if where == "label":  # a label that is not a tag, in train
        train_file = write_text(tmp_path / "train.txt", f"Oil\tB-DEF\nleak\t{huge}\n\n")
        argv = ["train", "--train", str(train_file), "--dev", str(train_file)]
        argv += ["--out", str(tmp_path / "run")]
    else:  # a token that differs between the files of score
        gold = write_text(tmp_path / "gold.txt", f"{huge}\tO\n\n")
        pred = write_text(tmp_path / "pred.txt", f"{huge}Y\tO\n\n")
        argv = ["score", str(gold), str(pred)]
    result = runner.invoke(app, argv)
    assert result.exit_code == 1
    assert "ZZZ'..." in result.stderr and len(result.stderr) < 600


def test_a_long_config_value_is_cut_in_the_message(tmp_path: Path) -> None:
    from tagger.config import load_config
    from tagger.errors import ConfigError

    path = write_text(tmp_path / "c.toml", f'[model]\ncell = "{"q" * 100_000}"\n')
    with pytest.raises(ConfigError) as error:
        load_config(path)
    assert "model.cell must be one of" in str(error.value) and len(str(error.value)) < 300


# --- sentences from memory -----------------------------------------------------------------------


def test_sentences_from_memory_are_located_by_sentence_and_token(tmp_path: Path) -> None:
    good = Sentence.from_tokens(["Oil", "leak"], ["B-DEF", "I-DEF"])
    bad = Sentence.from_tokens(["Oil", "leak", "at"], ["B-DEF", "I-DEF", "X-FOO"])
    with pytest.raises(DataError) as error:
        train_on_sentences([good, bad], [good], small_config(Path("x"), None), tmp_path / "run")
    assert str(error.value).startswith("the training sentences: sentence 2, token 3: tag 'X-FOO'")
    long = Sentence.from_tokens([f"w{i}" for i in range(12)], ["B-X"] + ["O"] * 11)
    config = small_config(Path("x"), None, data={"max_sentence_tokens": 11})
    with pytest.raises(DataError) as error:
        train_on_sentences([good], [good, long], config, tmp_path / "run")
    assert str(error.value).startswith(
        "the dev sentences: sentence 2: a sentence of 12 tokens is longer than "
        "data.max_sentence_tokens=11"
    )
    assert not (tmp_path / "run").exists()


def test_the_guards_locate_the_offending_token_by_its_file_line() -> None:
    sentence = Sentence(
        rows=(("a", "O"), ("b", "B-")),
        line_numbers=(7, 8),
        token_column=0,
        label_column=1,
        document=0,
    )
    with pytest.raises(DataError) as error:
        check_labels(sentence, "f.txt", 1)
    assert (error.value.path, error.value.line) == ("f.txt", 8)
    check_length(sentence, "f.txt", 1, 2)  # at the limit: accepted
    with pytest.raises(DataError, match="a sentence of 2 tokens to line 8") as error:
        check_length(sentence, "f.txt", 1, 1)
    assert (error.value.path, error.value.line) == ("f.txt", 7)


# --- the sentence limit --------------------------------------------------------------------------


def test_the_limit_is_the_tokenizers_default() -> None:
    assert TokenizerSettings().max_sentence_tokens == MAX_SENTENCE_TOKENS


def test_a_raised_limit_trains_and_is_the_models_tagging_limit(tmp_path: Path) -> None:
    from tagger.apply.evaluate import evaluate_files
    from tagger.apply.tagger import Tagger

    data = write_text(tmp_path / "train.txt", GOOD + _long(320))
    config = small_config(data, data, data={"max_sentence_tokens": 320}, train={"epochs": 1})
    tagger = Tagger.load(train(config, tmp_path / "run").model_path)
    assert tagger.tokenizer_settings.max_sentence_tokens == 320
    assert evaluate_files(tagger, [data])["overall"]["sentences"] == 3
    with pytest.raises(DataError, match="longer than data.max_sentence_tokens=319"):
        evaluate_files(tagger, [data], max_sentence_tokens=319)


def test_check_warns_of_sentences_over_the_limit(tmp_path: Path) -> None:
    path = write_text(tmp_path / "a.txt", GOOD + _long(MAX_SENTENCE_TOKENS) + "\n" + _long(301))
    report = check_files([path])
    found = report["files"][0]["too_long"]
    # The sentence of exactly the limit is accepted; the one over it is reported.
    assert found["count"] == 1 and found["examples"] == [{"line": 311, "tokens": 301}]
    assert found["limit"] == MAX_SENTENCE_TOKENS
    text = format_check(report)
    assert "1 sentence of more than 300 tokens" in text and "line 311: 301 tokens" in text
    assert check_files([path], max_sentence_tokens=301)["files"][0]["too_long"]["count"] == 0
    assert "too long" not in format_check(check_files([write_text(tmp_path / "b.txt", GOOD)]))


def test_a_lexicon_entry_without_tokens_is_quoted_short(tmp_path: Path) -> None:
    from tagger.text.lexicon import read_lexicon

    path = write_text(tmp_path / "lex.tsv", "pump\n" + "\u00a0" * 100_000 + "\tPART\n")
    with pytest.raises(DataError) as error:
        read_lexicon(path)
    message = str(error.value)
    assert message.startswith(f"{path}:2: the entry '\\xa0") and message.endswith("holds no token")
    assert len(message) < 400  # each cut character may show as a 4-character escape
