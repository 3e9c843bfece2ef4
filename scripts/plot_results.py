#!/usr/bin/env python3
"""Plot a tamis results file with pandas and matplotlib, for restyling.

`tamis report` draws its own plots; this script is a starting point for
anyone who wants to change their look. It reads one results file
(PREFIX.TRAIT.tsv.gz, decompressed) from standard input and writes a
Manhattan plot and a QQ plot side by side into one image.

Usage:

    zcat results/cohort.fev1_litres.tsv.gz | python3 scripts/plot_results.py --out fev1.png
    zcat results/cohort.fev1_litres.tsv.gz | python3 scripts/plot_results.py --out fev1.pdf --title "FEV1"

Options:
    --out FILE     the image to write; its extension picks the format (png, pdf, svg)
    --title TEXT   the figure title (default: none)
    --dpi N        resolution of raster images (default 150)

Needs the Debian packages python3-pandas and python3-matplotlib. It uses
neg_log_10_p_value rather than p_value, because p-values below 1e-308
(written like 3.2e-1088) do not fit in a floating-point number; the
genomic control lambda is the median of score_chisq over 0.454936, the
median of chi-square(1) (Devlin & Roeder 1999).
"""

import argparse
import sys

import matplotlib

matplotlib.use("Agg")  # no display needed
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

GENOME_WIDE = -np.log10(5e-8)  # common practice
SUGGESTIVE = 5.0               # p = 1e-5, common practice
CHI2_1_MEDIAN = 0.454936
SHADES = ("#1d6f7a", "#c26a2e")
CHROMOSOME_NAMES = {"23": "X", "24": "Y", "25": "MT"}


def parse_arguments():
    parser = argparse.ArgumentParser(description="Plot a tamis results file read from standard input.")
    parser.add_argument("--out", required=True, help="image file to write (png, pdf, svg)")
    parser.add_argument("--title", default="", help="figure title")
    parser.add_argument("--dpi", type=int, default=150, help="resolution of raster images")
    return parser.parse_args()


def read_results(stream):
    # Only the columns the plots need; chromosome stays text (as-is mode
    # contig names are allowed), "#NA" is the missing value.
    table = pd.read_csv(stream, sep="\t", na_values=["#NA"], keep_default_na=False,
                        usecols=["chromosome", "base_pair_location", "neg_log_10_p_value", "score_chisq"],
                        dtype={"chromosome": str})
    return table.dropna(subset=["neg_log_10_p_value"])


def chromosome_order(names):
    unique = list(dict.fromkeys(names))  # order of first appearance
    if all(name.isdigit() and 1 <= int(name) <= 25 for name in unique):
        unique.sort(key=int)
    return unique


def draw_manhattan(axes, table):
    order = chromosome_order(table["chromosome"])
    offset = 0
    ticks, labels = [], []
    for index, name in enumerate(order):
        rows = table[table["chromosome"] == name]
        start, end = rows["base_pair_location"].min(), rows["base_pair_location"].max()
        x = rows["base_pair_location"] - start + offset
        axes.scatter(x, rows["neg_log_10_p_value"], s=4, color=SHADES[index % 2], linewidths=0, rasterized=True)
        ticks.append(offset + (end - start) / 2)
        labels.append(CHROMOSOME_NAMES.get(name, name))
        offset += (end - start) + max(1, int(0.01 * (end - start)))
    axes.axhline(GENOME_WIDE, color="#b3263e", linewidth=1.2)
    axes.axhline(SUGGESTIVE, color="#6d7b8d", linewidth=1.0, linestyle="--")
    axes.set_xticks(ticks)
    axes.set_xticklabels(labels)
    axes.set_xlabel("chromosome")
    axes.set_ylabel("$-\\log_{10}\\,p$")
    axes.set_ylim(bottom=0)


def draw_qq(axes, table):
    observed = np.sort(table["neg_log_10_p_value"].to_numpy())[::-1]
    count = len(observed)
    expected = -np.log10(np.arange(1, count + 1) / (count + 1))
    axes.scatter(expected, observed, s=5, color=SHADES[0], linewidths=0, rasterized=True)
    top = expected[0] if count else 1.0
    axes.plot([0, top], [0, top], color=SHADES[1], linewidth=1.2)
    lambda_gc = np.nanmedian(table["score_chisq"]) / CHI2_1_MEDIAN
    axes.text(0.04, 0.94, f"$\\lambda$ = {lambda_gc:.3f}", transform=axes.transAxes, fontsize=12,
              verticalalignment="top")
    axes.set_xlabel("expected $-\\log_{10}\\,p$")
    axes.set_ylabel("observed $-\\log_{10}\\,p$")


def main():
    arguments = parse_arguments()
    table = read_results(sys.stdin)
    if table.empty:
        sys.exit("plot_results.py: the results on standard input hold no p-values")
    figure, (manhattan, qq) = plt.subplots(1, 2, figsize=(16, 5), gridspec_kw={"width_ratios": [3, 1]})
    draw_manhattan(manhattan, table)
    draw_qq(qq, table)
    if arguments.title:
        figure.suptitle(arguments.title)
    figure.tight_layout()
    figure.savefig(arguments.out, dpi=arguments.dpi)


if __name__ == "__main__":
    main()
