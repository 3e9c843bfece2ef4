/* The decode floor for tamis' throughput targets: the least work any reader
 * of DS dosages does with htslib, on one thread. Reads every record
 * (bcf_read), unpacks it (bcf_unpack) and pulls DS for every sample
 * (bcf_get_format_float), summing the values so that nothing is optimised
 * away. Prints the record count and the sum.
 *
 * Usage: decode_floor FILE.vcf.gz|FILE.bcf */
#include <htslib/vcf.h>
#include <stdio.h>
#include <stdlib.h>

int main(int argc, char **argv) {
  if (argc != 2) {
    fprintf(stderr, "usage: %s FILE.vcf.gz|FILE.bcf\n", argv[0]);
    return 2;
  }
  htsFile *file = hts_open(argv[1], "r");
  if (!file) {
    fprintf(stderr, "cannot open %s\n", argv[1]);
    return 1;
  }
  bcf_hdr_t *header = bcf_hdr_read(file);
  bcf1_t *record = bcf_init();
  if (!header || !record) {
    fprintf(stderr, "cannot read the header of %s\n", argv[1]);
    return 1;
  }
  float *values = NULL;
  int capacity = 0;
  double sum = 0.0;
  long records = 0;
  int status;
  while ((status = bcf_read(file, header, record)) == 0) {
    bcf_unpack(record, BCF_UN_ALL);
    const int count = bcf_get_format_float(header, record, "DS", &values, &capacity);
    for (int value_idx = 0; value_idx < count; ++value_idx) {
      if (!bcf_float_is_missing(values[value_idx]) && !bcf_float_is_vector_end(values[value_idx])) {
        sum += values[value_idx];
      }
    }
    ++records;
  }
  if (status < -1) {
    fprintf(stderr, "reading %s failed after %ld records\n", argv[1], records);
    return 1;
  }
  printf("%ld records, DS sum %.6f\n", records, sum);
  free(values);
  bcf_destroy(record);
  bcf_hdr_destroy(header);
  hts_close(file);
  return 0;
}
