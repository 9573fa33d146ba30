#!/usr/bin/env bash
# Benchmarks of morbus against the practical floor (a plain read-and-rewrite
# of the same file with the csv crate). Prints one table row per scenario:
# best wall time of RUNS runs, rows per second, peak memory, ratio to the
# floor. Not a test: figures go into the README's performance table.
#
#   bash benches/run.sh            # 1,000,000-episode scenarios
#   SIZES="1000000 10000000" bash benches/run.sh
#   SCENARIOS="wide long" bash benches/run.sh
#   SCENARIOS=explain bash benches/run.sh    # explain without history, then with a
#                                           # 365-day lookback in memory, on one
#                                           # thread, within --memory 64MiB, and
#                                           # to Parquet
#   MORBUS=path/to/morbus SCENARIOS=explain bash benches/run.sh   # another build
#   SCENARIOS=compare bash benches/run.sh    # compare on CSV, on Parquet and (with
#                                           # python/.venv) from a pyarrow table
#   SCENARIOS=providers bash benches/run.sh  # compare with 40 providers and 5 folds
#   SCENARIOS=parquet bash benches/run.sh   # Parquet in and out; its floor is a
#                                           # read-and-rewrite with the parquet crate
#   SCENARIOS=oneid bash benches/run.sh     # one id holding every episode (365 days
#                                           # and all) against the ordinary extract
#   SIZES=10000000 SCENARIOS=history-ratio bash benches/run.sh
#                                           # 365-day lookback against plain scoring
#   SIZES=100000000 SCENARIOS=national bash benches/run.sh
#                                           # 730-day lookback within --memory 1GiB
#                                           # against plain scoring of the same
#                                           # file (no in-memory run: it would not
#                                           # fit); needs about 9 GB for the input
#                                           # and 30 GB of temporary files in $DATA
#   SIZES=30000000 SCENARIOS=spill bash benches/run.sh
#                                           # 730-day lookback within --memory
#                                           # (SPILL_MEMORY, default 1GiB) against
#                                           # the same run held in memory; the
#                                           # partitions go to $DATA, the output
#                                           # to /dev/null
set -euo pipefail
cd "$(dirname "$0")/.."
RUNS=${RUNS:-3}
SIZES=${SIZES:-1000000}
SCENARIOS=${SCENARIOS:-"wide long lookback explain compare parquet python"}
DATA=${DATA:-bench-data}
mkdir -p "$DATA"
cargo build --release -q -p morbus -p morbus-bench
BIN=target/release
MORBUS=${MORBUS:-$BIN/morbus}   # MORBUS=path: time another build

# best_of CMD...: prints "seconds peak_kb" of the fastest of RUNS runs
best_of() {
  local best="" mem=""
  for _ in $(seq "$RUNS"); do
    local out tf
    tf=$(mktemp)
    /usr/bin/time -o "$tf" -f "%e %M" "$@" >/dev/null 2>&1 || { echo "failed: $*" >&2; rm -f "$tf"; return 1; }
    out=$(tail -1 "$tf")
    rm -f "$tf"
    local t=${out% *} m=${out#* }
    if [ -z "$best" ] || awk "BEGIN{exit !($t < $best)}"; then best=$t; mem=$m; fi
  done
  echo "$best $mem"
}

row() { # scenario rows seconds kb floor_seconds
  awk -v s="$1" -v n="$2" -v t="$3" -v m="$4" -v f="$5" 'BEGIN{
    rate = (t > 0) ? n / t : 0;
    ratio = (f > 0) ? sprintf("%.2f", t / f) : "-";
    printf "| %-34s | %12d | %8.2f s | %12.0f /s | %7.0f MB | %6s |\n", s, n, t, rate, m / 1024, ratio }'
}

echo "| scenario | episodes | time | episodes/s | peak memory | ratio to read-and-rewrite |"
echo "|---|---:|---:|---:|---:|---:|"
for n in $SIZES; do
  wide="$DATA/wide-$n.csv"
  long="$DATA/long-$n.csv"
  patients=$(( n * 3 / 10 ))
  [ -f "$wide" ] || $BIN/synth --episodes "$n" --patients "$patients" --fields 20 --seed 11 -q -o "$wide"
  read -r floor floor_mem < <(best_of $BIN/rewrite "$wide" "$DATA/out.csv")
  row "read-and-rewrite (floor), wide" "$n" "$floor" "$floor_mem" "$floor"
  for s in $SCENARIOS; do
    case $s in
      wide)
        read -r t m < <(best_of $MORBUS score "$wide" --dx 'dx*' -q -o "$DATA/out.csv")
        row "score, wide, 3 default indices" "$n" "$t" "$m" "$floor"
        read -r t1 m1 < <(best_of $MORBUS score "$wide" --dx 'dx*' -q --threads 1 -o "$DATA/out.csv")
        row "score, wide, one thread" "$n" "$t1" "$m1" "$floor"
        ;;
      long)
        [ -f "$long" ] || $BIN/synth --episodes "$n" --patients "$patients" --fields 20 --seed 11 --layout long -q -o "$long"
        read -r lfloor _ < <(best_of $BIN/rewrite "$long" "$DATA/out.csv")
        read -r t m < <(best_of $MORBUS score "$long" --layout long --id episode_id --dx code -q -o "$DATA/out.csv")
        row "score, long (one code per row)" "$n" "$t" "$m" "$lfloor"
        ;;
      lookback)
        read -r t m < <(best_of $MORBUS score "$wide" --dx 'dx*' --id patient_id --date admission_date --lookback 730 -q -o "$DATA/out.csv")
        row "score, wide, 730-day lookback" "$n" "$t" "$m" "$floor"
        ;;
      oneid)
        # One id with every episode (a placeholder id in a real extract):
        # the same size and codes, dates over the same three years. Its
        # ratio is to the ordinary extract's run with the same lookback.
        one="$DATA/oneid-$n.csv"
        # (synth caps episodes per patient, so the ordinary extract's
        # patient column is overwritten with one id)
        [ -f "$one" ] || sed -E '2,$ s/^([^,]*),[^,]*,/\1,P0000001,/' "$wide" > "$one"
        for lb in 365 all; do
          read -r base bm < <(best_of $MORBUS score "$wide" --dx 'dx*' --id patient_id --date admission_date --lookback $lb -q -o "$DATA/out.csv")
          row "score, wide, lookback $lb" "$n" "$base" "$bm" "$floor"
          read -r t m < <(best_of $MORBUS score "$one" --dx 'dx*' --id patient_id --date admission_date --lookback $lb -q -o "$DATA/out.csv")
          row "one id, lookback $lb (ratio: to above)" "$n" "$t" "$m" "$base"
        done
        ;;
      history-ratio)
        read -r plain pm < <(best_of $MORBUS score "$wide" --dx 'dx*' -q -o "$DATA/out.csv")
        row "score, wide, no lookback" "$n" "$plain" "$pm" "$floor"
        read -r t m < <(best_of $MORBUS score "$wide" --dx 'dx*' --id patient_id --date admission_date --lookback 365 -q -o "$DATA/out.csv")
        row "365-day lookback (ratio: to above)" "$n" "$t" "$m" "$plain"
        ;;
      spill)
        lb=(--dx 'dx*' --id patient_id --date admission_date --lookback 730 -q -o /dev/null)
        read -r base bm < <(best_of $MORBUS score "$wide" "${lb[@]}" --memory 64GiB)
        row "730-day lookback, in memory" "$n" "$base" "$bm" "$floor"
        read -r t m < <(best_of $MORBUS score "$wide" "${lb[@]}" --memory "${SPILL_MEMORY:-1GiB}" --temp-dir "$DATA")
        row "730-day lookback, --memory ${SPILL_MEMORY:-1GiB} (ratio: to above)" "$n" "$t" "$m" "$base"
        ;;
      national)
        read -r plain pm < <(best_of $MORBUS score "$wide" --dx 'dx*' -q -o /dev/null)
        row "score, wide, no lookback" "$n" "$plain" "$pm" "$floor"
        read -r t m < <(best_of $MORBUS score "$wide" --dx 'dx*' --id patient_id --date admission_date \
          --lookback 730 --memory 1GiB --temp-dir "$DATA" -q -o /dev/null)
        row "730-day lookback, --memory 1GiB (ratio: to above)" "$n" "$t" "$m" "$plain"
        ;;
      explain)
        if [ "$n" -le 1000000 ]; then
          read -r t m < <(best_of $MORBUS explain "$wide" --dx 'dx*' -q -o "$DATA/out.csv")
          row "explain, wide" "$n" "$t" "$m" "$floor"
          # With a 365-day lookback (about 2 GB of output): held in memory
          # on every core and on one, and spilled within 64 MiB.
          lb=(--dx 'dx*' --id patient_id --date admission_date --lookback 365 -q -o "$DATA/out.csv")
          read -r t m < <(best_of $MORBUS explain "$wide" "${lb[@]}")
          row "explain, 365-day lookback" "$n" "$t" "$m" "$floor"
          read -r t m < <(best_of $MORBUS explain "$wide" "${lb[@]}" --threads 1)
          row "explain, 365-day lookback, one thread" "$n" "$t" "$m" "$floor"
          read -r t m < <(best_of $MORBUS explain "$wide" "${lb[@]}" --memory 64MiB --temp-dir "$DATA")
          row "explain, 365-day lookback, --memory 64MiB" "$n" "$t" "$m" "$floor"
          # To Parquet: the records' cells handed to the writer as values.
          read -r t m < <(best_of $MORBUS explain "$wide" --dx 'dx*' --id patient_id \
            --date admission_date --lookback 365 -q -o "$DATA/out.parquet")
          row "explain, 365-day lookback, to Parquet" "$n" "$t" "$m" "$floor"
        fi
        ;;
      compare)
        if $MORBUS compare --help >/dev/null 2>&1; then
          read -r t m < <(best_of $MORBUS compare "$wide" --dx 'dx*' --outcome died_within_30_days \
            --index charlson:charlson1987,charlson:quan2011,charlson:count,elixhauser:vanwalraven2009,elixhauser:count,hfrs:gilbert2018)
          row "compare, 6 index specifications" "$n" "$t" "$m" "$floor"
          # The same rows as typed Parquet, and (with python/.venv) from a
          # pyarrow table read from that file (the read itself not timed).
          pq="$DATA/wide-$n.parquet"
          [ -f "$pq" ] || $BIN/rewrite --typed-parquet "$wide" "$pq"
          read -r t m < <(best_of $MORBUS compare "$pq" --dx 'dx*' --outcome died_within_30_days \
            --index charlson:charlson1987,charlson:quan2011,charlson:count,elixhauser:vanwalraven2009,elixhauser:count,hfrs:gilbert2018)
          row "compare, 6 specs, Parquet" "$n" "$t" "$m" "$floor"
          if [ -x python/.venv/bin/python ]; then
            python/.venv/bin/python python/bench_compare.py --parquet "$pq" --repeat "$RUNS" \
              | sed 's/^/python: /' >&2 || true
          fi
        fi
        ;;
      providers)
        # The same extract with a ward column (5 sites x 8 wards = 40
        # providers); every other column is as in the wide extract.
        wards="$DATA/wards-$n.csv"
        [ -f "$wards" ] || $BIN/synth --episodes "$n" --patients "$patients" --fields 20 --seed 11 \
          --wards-per-site 8 -q -o "$wards"
        read -r t m < <(best_of $MORBUS compare "$wards" --dx 'dx*' --outcome died_within_30_days \
          --index charlson:charlson1987,charlson:quan2011,charlson:count,elixhauser:vanwalraven2009,elixhauser:count,hfrs:gilbert2018 \
          --adjust age --adjust-cat sex --by ward --folds 5 --id patient_id)
        row "compare, 6 specs, --by (40), --folds 5" "$n" "$t" "$m" "$floor"
        ;;
      parquet)
        # The same extract as typed Parquet (dates as dates; zstd), and the
        # Parquet floor: read and rewrite it with the parquet crate.
        pq="$DATA/wide-$n.parquet"
        [ -f "$pq" ] || $BIN/rewrite --typed-parquet "$wide" "$pq"
        read -r pfloor pfloor_mem < <(best_of $BIN/rewrite "$pq" "$DATA/out.parquet")
        row "read-and-rewrite (floor), Parquet" "$n" "$pfloor" "$pfloor_mem" "$pfloor"
        read -r t m < <(best_of $MORBUS score "$pq" --dx 'dx*' -q -o "$DATA/out.parquet")
        row "score, Parquet to Parquet" "$n" "$t" "$m" "$pfloor"
        read -r t m < <(best_of $MORBUS score "$pq" --dx 'dx*' -q -o "$DATA/out.csv")
        row "score, Parquet to CSV" "$n" "$t" "$m" "$pfloor"
        read -r t m < <(best_of $MORBUS score "$wide" --dx 'dx*' -q -o "$DATA/out.parquet")
        row "score, CSV to Parquet" "$n" "$t" "$m" "$pfloor"
        read -r t m < <(best_of $MORBUS score "$pq" --dx 'dx*' --id patient_id --date admission_date --lookback 730 -q -o "$DATA/out.parquet")
        row "score, Parquet, 730-day lookback" "$n" "$t" "$m" "$pfloor"
        ;;
      python)
        if [ -x python/.venv/bin/python ] && [ -f python/bench.py ]; then
          python/.venv/bin/python python/bench.py --rows "$n" --csv "$wide" | sed 's/^/python: /' >&2 || true
        fi
        ;;
    esac
  done
  echo "input: $(du -h "$wide" | cut -f1) wide, $(nproc) cores" >&2
done
