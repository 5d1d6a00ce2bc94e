#!/usr/bin/env bash
# Bounded fuzzing of the reading path (CIF grammar and structure, POSCAR, extended XYZ) for CI.
# Needs cargo-fuzz and a nightly toolchain; without them it says so and exits 0, since the
# stable mutation test (crates/hopmap/tests/mutations.rs) runs in every `cargo test`.
# Crash inputs land in fuzz/artifacts/<target>/: copy each into testdata/robust/ with a test.
# Usage: tools/fuzz_ci.sh [seconds per target, default 120]
set -euo pipefail
cd "$(dirname "$0")/.."
secs=${1:-120}
# cargo-fuzz is installed into target/ci-tools when the nightly toolchain is there but the tool
# is not (a fresh machine): about 2 minutes from crates.io.
if ! cargo +nightly fuzz --version >/dev/null 2>&1 && cargo +nightly --version >/dev/null 2>&1; then
  echo "fuzz: installing cargo-fuzz into target/ci-tools"
  cargo install --quiet --locked --root target/ci-tools cargo-fuzz
  export PATH="$PWD/target/ci-tools/bin:$PATH"
fi
if ! cargo +nightly fuzz --version >/dev/null 2>&1; then
  echo "fuzz: cargo-fuzz or the nightly toolchain is not installed; skipped (the stable mutation test still ran)"
  exit 0
fi
seeds_cif=(structures/reference testdata/cif testdata/robust)
[ -d ../shared/cif-corpus/syntax ] && seeds_cif+=(../shared/cif-corpus/syntax)
for t in cif_grammar poscar extxyz; do
  mkdir -p "fuzz/corpus/$t"
  case $t in
    cif_grammar) seeds=("${seeds_cif[@]}") ;;
    poscar) seeds=(testdata/cathodes testdata/robust) ;;
    extxyz) seeds=(testdata/robust) ;;
  esac
  echo "== fuzz $t for $secs s"
  nice -n 5 cargo +nightly fuzz run "$t" "fuzz/corpus/$t" "${seeds[@]}" -- \
    -max_total_time="$secs" -rss_limit_mb=2048 -timeout=10 -max_len=65536
done
