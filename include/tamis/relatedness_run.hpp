// `tamis relatedness`: the genomic relationship matrix of the genotype
// samples, streamed from the genotype files once and written to
// PREFIX.relatedness.tsv.gz (or one part of it), with PREFIX.log and a
// metadata sidecar.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"
#include "tamis/scan.hpp"

namespace tamis {

struct RelatednessOptions {
  std::vector<std::string> genotype_paths;
  DosageField dosage_field = DosageField::automatic;
  int haploid_dosage = 1;
  std::vector<GenomicRegion> regions;  // --region, or the positions of a --variants list
  VariantSelection selection;          // --variants
  std::string keep_samples_path;
  std::string drop_samples_path;
  // Markers: biallelic variants that pass these floors over the samples
  // taken; by default a minor allele frequency of 1% and a call rate of 95%.
  QcFloors floors{0.01, 0.0, 0.0, 0.95, 0.0};
  double thin_kb = 0.0;      // keep markers at least this far apart on a contig (0: all)
  double keep_above = 0.05;  // write pairs whose relatedness reaches this
  int part = 1;              // --part K/N: the K-th of N shares of the sample-pair tiles
  int part_count = 1;
  int threads = 1;
  std::string out_prefix;
  std::string command_line;  // recorded in the log
  bool quiet = false;        // no progress display
  // 0: GrmAccumulator::kDefaultTileSize. Tests set small tiles so that a
  // small cohort has many.
  std::size_t tile_size = 0;
};

// Markers read and what became of them.
struct MarkerTally {
  std::uint64_t records = 0;
  std::uint64_t alleles = 0;
  std::uint64_t multiallelic = 0;   // alleles of records with more than one ALT
  std::uint64_t not_selected = 0;   // left out by --variants
  std::uint64_t filtered[qc_reason_count] = {0, 0, 0, 0, 0};
  std::uint64_t thinned = 0;        // closer than --thin-kb to the marker kept before
  std::uint64_t used = 0;           // went into the matrix
};

struct RelatednessSummary {
  std::size_t sample_count = 0;
  std::uint64_t marker_count = 0;
  std::uint64_t rows = 0;  // written, diagonal rows included
  std::string data_path;
  MarkerTally tally;
};

// The log's path: PREFIX.log for a whole matrix, PREFIX.partK-of-N.log for a part.
std::string relatedness_log_path(const std::string& out_prefix, int part, int part_count);

// Throws tamis::Error for anything the user can fix; writes nothing under a
// final name unless the matrix is complete.
RelatednessSummary run_relatedness(const RelatednessOptions& options);

}  // namespace tamis
