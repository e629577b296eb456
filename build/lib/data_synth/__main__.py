"""Command line: write a synthetic word table, e.g.

    python -m data_synth --documents 300 --seed 0 --out data/synth.parquet
    python -m data_synth --documents 5 --out data/truth.parquet --render pdf,png --render-dir data/pages
    python -m data_synth --documents 50 --out data/words.parquet --links-out data/links.parquet
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

import pandas as pd
from tqdm import tqdm

from data_synth.generator import iter_documents_with_links
from data_synth.layouts import LAYOUT_IDS
from data_synth.noise import NoiseConfig
from data_synth.render import ScanNoise, render_documents
from dochar.data.word_table import table_name_problem, write_word_table


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m data_synth",
        description="Generate synthetic certificates of analysis as a labelled word table.")
    parser.add_argument("--documents", type=int, default=300, help="number of documents")
    parser.add_argument("--seed", type=int, default=0, help="random seed (>= 0)")
    parser.add_argument("--out", type=Path, required=True,
                        help="output file; .parquet or .csv decides the format")
    parser.add_argument("--links-out", type=Path, default=None,
                        help="also write the links table (key -> value, column heading -> "
                             "cell); .parquet or .csv")
    parser.add_argument("--layouts", default=None,
                        help=f"comma-separated layout ids (default all): {','.join(LAYOUT_IDS)}")
    parser.add_argument("--jitter", type=float, default=0.0, help="box jitter std in points")
    parser.add_argument("--split-rate", type=float, default=0.0, help="word split probability")
    parser.add_argument("--merge-rate", type=float, default=0.0, help="word merge probability")
    parser.add_argument("--confusion-rate", type=float, default=0.0,
                        help="per-character look-alike swap probability")
    render = parser.add_argument_group("rendering (the --out table stays the truth in points)")
    render.add_argument("--render", default="",
                        help="comma-separated: pdf, png (page images; their truth in pixels "
                             "goes to RENDER_DIR/truth_images.parquet)")
    render.add_argument("--render-dir", type=Path, help="folder for the rendered files")
    render.add_argument("--dpi", type=float, default=150.0, help="page image resolution")
    render.add_argument("--scan-blur", type=float, default=0.0,
                        help="Gaussian blur radius in pixels")
    render.add_argument("--scan-skew", type=float, default=0.0,
                        help="largest page rotation in degrees")
    render.add_argument("--scan-speckle", type=float, default=0.0,
                        help="fraction of pixels turned black or white")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = _parser()
    args = parser.parse_args(argv)
    for option, path in (("--out", args.out), ("--links-out", args.links_out)):
        if path is not None and (problem := table_name_problem(path, option)) is not None:
            parser.error(problem)
    formats = {f.strip() for f in args.render.split(",") if f.strip()}
    if formats and args.render_dir is None:
        parser.error("--render needs --render-dir")
    layouts = None if args.layouts is None else [s.strip() for s in args.layouts.split(",")
                                                 if s.strip()]
    try:
        noise = NoiseConfig(args.jitter, args.split_rate, args.merge_rate, args.confusion_rate)
        documents = iter_documents_with_links(args.documents, args.seed, layouts=layouts,
                                              noise=noise)
        pairs = list(tqdm(documents, total=max(args.documents, 0), unit="doc",
                          desc="certificates"))
    except (TypeError, ValueError) as error:
        parser.error(str(error))
    if not pairs:
        parser.error("--documents must be at least 1")
    table = pd.concat([words for words, _ in pairs], ignore_index=True)
    path = write_word_table(table, args.out)
    pages = table.groupby("doc_id")["page"].nunique().sum()
    print(f"wrote {path}: {table['doc_id'].nunique()} documents, {pages} pages, "
          f"{len(table)} words, {table['layout_id'].nunique()} layouts, seed {args.seed}")
    if args.links_out is not None:
        links = pd.concat([links for _, links in pairs], ignore_index=True)
        write_word_table(links, args.links_out)
        kinds = ", ".join(f"{n} {kind}" for kind, n in links["kind"].value_counts().items())
        print(f"wrote {args.links_out}: {len(links)} links ({kinds})")
    if formats:
        try:
            scan = ScanNoise(args.scan_blur, args.scan_skew, args.scan_speckle)
            counts = render_documents(table, args.render_dir, formats, dpi=args.dpi,
                                      noise=scan, seed=args.seed)
        except ValueError as error:
            parser.error(str(error))
        print(f"rendered into {args.render_dir}: {counts['pdf']} PDFs, "
              f"{counts['png']} page images at {args.dpi:g} dpi")
    return 0


if __name__ == "__main__":
    sys.exit(main())
