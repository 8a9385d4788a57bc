# Shared by tools/test and tools/demo: install what is missing, then build.
# Sourced, not run. Quiet when nothing is missing.

HOLDFAST_ROOT=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)

# Debian packages the build, the tests and the demo need.
HOLDFAST_PACKAGES=(
  cmake g++ make pkg-config
  libeigen3-dev libpaho-mqtt-dev libpaho-mqttpp-dev nlohmann-json3-dev
  libgtest-dev libgmock-dev libbenchmark-dev libcli11-dev
  python3 python3-iapws python3-scipy python3-numpy python3-matplotlib tzdata
  chromium
  mosquitto mosquitto-clients openssl
  clang libclang-rt-14-dev
)

holdfast_ensure_packages() {
  local missing=()
  local p
  for p in "${HOLDFAST_PACKAGES[@]}"; do
    if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
      missing+=("$p")
    fi
  done
  [ ${#missing[@]} -eq 0 ] && return 0
  echo "holdfast: installing missing packages: ${missing[*]}"
  local sudo=""
  [ "$(id -u)" -ne 0 ] && sudo="sudo"
  export DEBIAN_FRONTEND=noninteractive
  $sudo apt-get update -qq
  $sudo apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
}

# holdfast_build DIR [cmake args...]: configure once, build quietly.
holdfast_build() {
  local dir=$1; shift
  if [ ! -f "$dir/CMakeCache.txt" ]; then
    cmake -S "$HOLDFAST_ROOT" -B "$dir" "$@" >"$dir.configure.log" 2>&1 || {
      cat "$dir.configure.log"; return 1; }
  fi
  cmake --build "$dir" -j"$(nproc)" >"$dir.build.log" 2>&1 || {
    grep -E "error|Error" -A3 "$dir.build.log" | head -60; return 1; }
}
