# Helpers shared by the benchmark scripts (sourced, not run).

# Runs a command under GNU time -v; prints "WALL_SECONDS PEAK_KB".
measure() {
  local report
  report=$(mktemp)
  /usr/bin/time -v "$@" > /dev/null 2> "$report"
  awk -F': ' '
    /Elapsed \(wall clock\)/ {
      n = split($2, part, ":"); wall = 0
      for (i = 1; i <= n; i++) wall = wall * 60 + part[i]
    }
    /Maximum resident set size/ { peak = $2 }
    END { printf "%.3f %d\n", wall, peak }' "$report"
  rm -f "$report"
}

# The median of the numbers on stdin, one a line.
median() { sort -g | awk '{ value[NR] = $1 } END { print value[int((NR + 1) / 2)] }'; }
