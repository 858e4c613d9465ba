"""Applying a trained model: the `Tagger` object (load, save, predict, tag texts), batch tagging of
documents, and evaluation of a model on gold files.

    tagger.py      `Tagger`; its torch work on token lists is in predict.py
    documents.py   reading the input formats into documents (or `Skipped` records)
    plaintext.py   plain text read in bounded pieces cut at sentence boundaries; its sentences
    column_input.py  column files to tag, checked a sentence at a time
    engine.py      chunks of documents -> sentences and tokens with offsets -> scored spans
    outputs.py     the output formats (jsonl, columns, table)
    writing.py     writing outputs in order, joining the pieces of a document, counting
    pool.py        worker processes that tag chunks, results in input order
    tagging.py     the `tag` pipeline: `tag_files`, its options and summary
    tokenizing.py  `tokenize_files`: the tokens the tagger sees
    evaluate.py    `evaluate_files`: tag gold files and score them
    export_file.py, exporting.py, export_graphs.py, label_decoding.py, exported.py
                   `export` and the onnx backend: the export file, writing it, the network's
                   parts as ONNX graphs, numpy decoding, `ExportedTagger` (no torch)

May import `tagger.network` and everything below it; never `tagger.training` or the CLI.
"""
