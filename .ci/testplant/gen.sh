#!/bin/bash
# usage: .ci/testplant/gen.sh OUT_DIR
# The plant sets the loops are measured on (an instrument beside flowset, not a test):
#   OUT_DIR/suite  plantsim's fixed suite s01-s12
#   OUT_DIR/o      o01-o22, seeds 9101-9122, 3-300 branches
#   OUT_DIR/p      p01-p20, seeds 9901-9920, 5-300 branches, faults on 17-30 % of branches,
#                  valves found anywhere, a second state with 30 % of valves moved on every other plant
#   OUT_DIR/q      q01-q16, seeds 9951-9966, 6-220 branches, faults on 20-35 % of branches, valves found
#                  open or anywhere, a second state with 50 % moved on every third plant (a check set)
#   OUT_DIR/v      v01-v14, seeds 9971-9984, 10-220 branches, faults on 25 %, valves found anywhere, a
#                  second state with 40 % moved on every other plant (made after the moves sheet, a check)
set -e
PS=${PLANTSIM:-$(cd "$(dirname "$0")/../../.." && pwd)/shared/testplant/plantsim.py}
O=$1
mkdir -p "$O/o" "$O/p" "$O/q" "$O/v"
/usr/bin/python3 "$PS" suite --out "$O/suite" > /dev/null
sizes=(3 5 8 10 15 20 25 30 40 50 60 70 80 90 100 120 150 180 200 250 300 300)
for i in $(seq 1 22); do
  n=${sizes[$((i-1))]}
  arr=direct; a=d; [ $((i % 2)) = 0 ] && { arr=reverse; a=r; }
  pump=dp; [ $((i % 4)) = 0 -o $((i % 4)) = 1 ] && pump=speed
  found=open; [ $((i % 3)) = 0 ] && found=random
  extra=(); [ $((i % 5)) = 0 ] && extra=(--second-state 0.3)
  name=$(printf 'o%02d_n%d_%s_%s' "$i" "$n" "$a" "$pump")
  /usr/bin/python3 "$PS" make --seed $((9100 + i)) --branches "$n" --arrangement $arr --pump $pump \
    --as-found $found "${extra[@]}" --name "$name" --out "$O/o/$name.json" > /dev/null
done
sizes=(5 8 12 16 20 25 30 40 50 60 70 80 100 120 140 160 180 200 250 300)
rates=(0.17 0.20 0.25 0.30)
for i in $(seq 1 20); do
  n=${sizes[$((i-1))]}
  arr=direct; a=d; [ $((i % 2)) = 0 ] && { arr=reverse; a=r; }
  pump=speed; [ $((i % 3)) = 0 ] && pump=dp
  extra=(); [ $((i % 2)) = 1 ] && extra=(--second-state 0.3)
  name=$(printf 'p%02d_n%d_%s_%s' "$i" "$n" "$a" "$pump")
  /usr/bin/python3 "$PS" make --seed $((9900 + i)) --branches "$n" --arrangement $arr --pump $pump \
    --as-found random --fault-rate ${rates[$((i % 4))]} --min-faults 1 "${extra[@]}" --name "$name" \
    --out "$O/p/$name.json" > /dev/null
done
sizes=(6 9 14 18 24 33 45 55 66 77 90 110 130 160 190 220)
rates=(0.20 0.25 0.30 0.35)
for i in $(seq 1 16); do
  n=${sizes[$((i-1))]}
  arr=reverse; a=r; [ $((i % 2)) = 0 ] && { arr=direct; a=d; }
  pump=speed; [ $((i % 4)) = 1 ] && pump=dp
  found=random; [ $((i % 2)) = 0 ] && found=open
  extra=(); [ $((i % 3)) = 0 ] && extra=(--second-state 0.5)
  name=$(printf 'q%02d_n%d_%s_%s' "$i" "$n" "$a" "$pump")
  /usr/bin/python3 "$PS" make --seed $((9950 + i)) --branches "$n" --arrangement $arr --pump $pump \
    --as-found $found --fault-rate ${rates[$((i % 4))]} "${extra[@]}" --name "$name" --out "$O/q/$name.json" > /dev/null
done
sizes=(10 14 20 28 36 45 55 70 85 100 120 150 180 220)
for i in $(seq 1 14); do
  n=${sizes[$((i-1))]}
  arr=direct; a=d; [ $((i % 2)) = 0 ] && { arr=reverse; a=r; }
  pump=speed; [ $((i % 3)) = 0 ] && pump=dp
  extra=(); [ $((i % 2)) = 1 ] && extra=(--second-state 0.4)
  name=$(printf 'v%02d_n%d_%s_%s' "$i" "$n" "$a" "$pump")
  /usr/bin/python3 "$PS" make --seed $((9970 + i)) --branches "$n" --arrangement $arr --pump $pump \
    --as-found random --fault-rate 0.25 --min-faults 1 "${extra[@]}" --name "$name" --out "$O/v/$name.json" > /dev/null
done
# The public views run_suite.sh reads (loop.py makes its own).
for f in "$O"/o/*.json "$O"/p/*.json "$O"/q/*.json "$O"/v/*.json; do
  case $f in *.public.json) continue ;; esac
  /usr/bin/python3 "$PS" public --scenario "$f" --out "${f%.json}.public.json" > /dev/null
done
