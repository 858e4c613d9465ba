from __future__ import annotations

from pathlib import Path

import pytest

from tagger.config import Config, apply_overrides, config_from_dict, load_config, parse_override
from tagger.errors import ConfigError

CONFIGS = Path(__file__).resolve().parents[1] / "configs"


@pytest.mark.parametrize("path", sorted(CONFIGS.glob("*.toml")), ids=lambda p: p.name)
def test_every_shipped_config_loads(path: Path) -> None:
    config = load_config(path)
    assert config.model.cell in ("rnn", "minimal", "gru", "lstm")


def test_a_cell_override_differs_from_default_only_in_the_cell() -> None:
    # The per-cell configs went: `--set model.cell=KIND` over the default does their job.
    default = load_config(CONFIGS / "default.toml")
    for cell in ("rnn", "minimal", "gru", "lstm"):
        config = apply_overrides(default, [f"model.cell={cell}"])
        assert config.model.cell == cell
        assert apply_overrides(config, ["model.cell='lstm'"]) == default


def test_missing_keys_take_defaults(tmp_path: Path) -> None:
    path = tmp_path / "c.toml"
    path.write_text("[model]\nlayers = 3\n")
    config = load_config(path)
    assert config.model.layers == 3
    assert config.train == Config().train


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("[model]\ncells = 'gru'\n", "unknown key model.cells"),
        ("[modle]\n", "unknown table [modle]"),
        ("[model]\nlayers = '2'\n", "model.layers must be int"),
        ("[model]\nlayers = 0\n", "model.layers must be at least 1"),
        ("[model]\ncell = 'transformer'\n", "model.cell must be one of rnn, minimal, gru, lstm"),
        ("[model]\ndropout = 1.5\n", "model.dropout must be in [0, 1)"),
        ("[model]\nbidirectional = 1\n", "model.bidirectional must be bool"),
        ("[train]\nlearning_rate = -1\n", "train.learning_rate must not be negative"),
        ("[model]\nscheme = 'XYZ'\n", "XYZ"),
        ("[model\n", "not valid TOML"),
    ],
)
def test_bad_configs_name_the_key(tmp_path: Path, text: str, fragment: str) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(ConfigError) as error:
        load_config(path)
    assert fragment in str(error.value)
    assert str(path) in str(error.value)


def test_int_is_accepted_where_a_float_is_expected() -> None:
    config = config_from_dict({"train": {"learning_rate": 1}})
    assert config.train.learning_rate == 1.0 and isinstance(config.train.learning_rate, float)


def test_overrides_are_read_as_toml_values() -> None:
    assert parse_override("model.cell=gru") == ("model", "cell", "gru")
    assert parse_override("train.learning_rate=0.01") == ("train", "learning_rate", 0.01)
    assert parse_override("model.bidirectional=false") == ("model", "bidirectional", False)
    config = apply_overrides(Config(), ["model.layers=3", "data.train=x.txt"])
    assert config.model.layers == 3 and config.data.train == "x.txt"


def test_malformed_override_is_refused() -> None:
    with pytest.raises(ConfigError, match="section.key=value"):
        apply_overrides(Config(), ["layers=3"])


def test_to_toml_reads_back_as_the_same_config(tmp_path: Path) -> None:
    # Values JSON would spell in ways TOML rejects (Infinity) or that need escapes. The paths are
    # absolute: relative ones would be read from the config file's folder.
    config = config_from_dict(
        {
            "data": {"train": str(tmp_path / 'a "quoted" n\u00e4me\\with\tstops.txt')},
            "model": {"feature_columns": [1, 2], "lexicons": [str(tmp_path / "x.tsv")]},
            "train": {"max_minutes": float("inf"), "learning_rate": 1e-7},
        }
    )
    path = tmp_path / "config.toml"
    path.write_text(config.to_toml(), encoding="utf-8")
    assert load_config(path) == config
    assert "max_minutes = inf" in config.to_toml()


def test_the_tokenizer_table_is_validated_and_reaches_the_model(tmp_path: Path) -> None:
    path = tmp_path / "c.toml"
    path.write_text(
        "[tokenizer]\nsplit_hyphens = true\nkeep_number_units = true\n",
        encoding="utf-8",
    )
    config = load_config(path)
    assert config.tokenizer.split_hyphens and config.tokenizer.keep_number_units
    # written back by the run folder's writer and read again unchanged
    again = tmp_path / "again.toml"
    again.write_text(config.to_toml(), encoding="utf-8")
    assert load_config(again) == config
    with pytest.raises(ConfigError, match="split_clitics"):
        config_from_dict({"tokenizer": {"split_clitics": "yes"}})
    with pytest.raises(ConfigError, match="unknown key tokenizer.hyphens"):
        config_from_dict({"tokenizer": {"hyphens": True}})
    # one sentence limit, in [data]
    with pytest.raises(ConfigError, match="the sentence limit is data.max_sentence_tokens"):
        config_from_dict({"tokenizer": {"max_sentence_tokens": 80}})


@pytest.mark.parametrize(
    ("section", "key", "value"),
    [("model", "cell", "lstmm"), ("model", "output", "crf2"), ("data", "delimiter", "comma"),
     ("train", "lr_schedule", "cosine"), ("model", "lexicon_case", "upper")],
)  # fmt: skip
def test_choices_name_the_allowed_values(section: str, key: str, value: str) -> None:
    with pytest.raises(ConfigError, match=f"{section}.{key} must be one of .*got '{value}'"):
        config_from_dict({section: {key: value}})


def test_scheme_names_are_read_by_alias_and_stored_canonical() -> None:
    assert config_from_dict({"model": {"scheme": "bio"}}).model.scheme == "IOB2"
    assert config_from_dict({"model": {"scheme": "iobes"}}).to_dict()["model"]["scheme"] == "BIOES"
    with pytest.raises(ConfigError, match="model.scheme: unknown tagging scheme"):
        config_from_dict({"model": {"scheme": "BIOX"}})


@pytest.mark.parametrize("path", sorted(CONFIGS.glob("*.toml")), ids=lambda p: p.name)
def test_shipped_configs_name_no_data_and_set_no_time_budget(path: Path) -> None:
    # The data is the user's to name (--train, --dev): a shipped config's files would silently
    # score a user's run against someone else's dev set. A time budget would make the model
    # depend on how busy the machine is.
    config = load_config(path)
    assert (config.data.train, config.data.dev) == ("", "")
    assert config.model.lexicons == () and config.model.pretrained_vectors == ""
    assert config.train.max_minutes == 0.0


def test_the_demo_script_names_the_demo_files() -> None:
    root = CONFIGS.parent
    line = next(
        line
        for line in (root / "scripts" / "demo.sh").read_text().splitlines()
        if line.startswith("$T train ")
    )
    words = line.split()
    for option in ("--train", "--dev"):
        assert (root / words[words.index(option) + 1]).is_file()
    assert load_config(root / words[words.index("--config") + 1]).data.train == ""


def test_relative_paths_are_read_from_the_config_files_folder(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    folder = tmp_path / "project" / "configs"
    folder.mkdir(parents=True)
    (folder / "c.toml").write_text(
        '[data]\ntrain = "../data/train.txt"\ndev = "dev.txt"\n'
        '[model]\npretrained_vectors = "vectors/v.txt"\nlexicons = ["a.tsv", "/abs/b.tsv"]\n'
    )
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    config = load_config(Path("..") / "project" / "configs" / "c.toml")
    assert config.data.train == str(tmp_path / "project" / "data" / "train.txt")
    assert config.data.dev == str(folder / "dev.txt")
    assert config.model.pretrained_vectors == str(folder / "vectors" / "v.txt")
    assert config.model.lexicons == (str(folder / "a.tsv"), "/abs/b.tsv")


def test_resolving_leaves_empty_paths_and_standard_input_alone(tmp_path: Path) -> None:
    from tagger.config import resolve_paths

    config = config_from_dict({"data": {"train": "-"}})
    assert resolve_paths(config, tmp_path) == config
    assert resolve_paths(config, tmp_path).data.dev == ""


def test_config_changes_name_each_key_with_both_values() -> None:
    from tagger.training.config_changes import config_changes

    saved = config_from_dict({"train": {"epochs": 5}, "model": {"cell": "gru"}}).to_dict()
    del saved["train"]["weight_average"]  # a key added since: its default is no change
    current = config_from_dict({"train": {"epochs": 9}, "model": {"cell": "gru", "layers": 3}})
    assert [str(change) for change in config_changes(saved, current)] == [
        "model.layers 2 -> 3",
        "train.epochs 5 -> 9",
    ]
    assert config_changes(saved, config_from_dict(saved)) == []
    with pytest.raises(ConfigError):
        config_changes(None, current)
    with pytest.raises(ConfigError, match="model.cell"):
        config_changes({"model": {"cell": "nope"}}, current)


def test_the_sentence_limit_is_a_positive_data_key(tmp_path: Path) -> None:
    assert Config().data.max_sentence_tokens == 300
    assert config_from_dict({"data": {"max_sentence_tokens": 5}}).data.max_sentence_tokens == 5
    with pytest.raises(ConfigError, match="data.max_sentence_tokens must be at least 1"):
        config_from_dict({"data": {"max_sentence_tokens": 0}})
