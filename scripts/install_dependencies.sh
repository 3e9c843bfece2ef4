#!/usr/bin/env bash
# Installs the Debian packages tamis needs to build, test and run its demo
# (clang 14 and its runtime libraries build the libFuzzer targets).
# Packages already present are left alone; installing needs root.
set -euo pipefail
packages=(
  build-essential cmake pkg-config
  libhts-dev libdeflate-dev libeigen3-dev libtbb-dev libcli11-dev zlib1g-dev
  libgtest-dev libbenchmark-dev
  r-base-core r-cran-lme4 r-cran-sandwich r-cran-lmtest bcftools tabix snakemake chromium
  libcairo2-dev python3-pandas python3-matplotlib python3-mpmath
  clang-14 libclang-rt-14-dev
)
missing=()
for package in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$package" 2>/dev/null | grep -q "install ok installed" || missing+=("$package")
done
if [ ${#missing[@]} -eq 0 ]; then exit 0; fi
echo "installing: ${missing[*]}"
sudo_cmd=()
if [ "$(id -u)" -ne 0 ]; then sudo_cmd=(sudo); fi
export DEBIAN_FRONTEND=noninteractive
"${sudo_cmd[@]}" apt-get update -qq
"${sudo_cmd[@]}" apt-get install -y -qq --no-install-recommends "${missing[@]}"
