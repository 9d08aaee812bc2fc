#!/usr/bin/env bash
# Measures what `midsag serve` holds while receiving large uploads, and
# when it closes stalled ones (issue 12, item 1). Not in CI; prints figures.
#
#  1. Peak RSS (GNU time's "Maximum resident set size") of serve under N
#     concurrent uploads of SIZE_MB each (default 4 x 400 MB): STOW-RS
#     bodies of two instances of SIZE_MB/2 each (phantom MR instances
#     grown with Data Set Trailing Padding (FFFC,FFFC), PS3.5 7.1), all
#     sent at once with curl.
#  2. When a request that declared 500 MB and sent nothing is closed, and
#     when one that sends one byte every 5 s is (--read-idle 20s,
#     --min-read-rate 1024, the defaults).
#
# Usage: bench/ingest-memory.sh [uploads, default 4] [SIZE_MB, default 400]
set -euo pipefail
cd "$(dirname "$0")/.."
n=${1:-4}
size_mb=${2:-400}
make -s build >/dev/null
bin=$PWD/bin/midsag
tmp=$(mktemp -d)
trap 'kill "$pid" 2>/dev/null || true; rm -rf "$tmp"' EXIT
"$bin" phantom -studies 1 -no-decoys -syntax explicit-le -out "$tmp/ph" >/dev/null
/usr/bin/python3 - "$tmp" "$n" "$size_mb" <<'PY'
import glob, os, struct, sys, uuid
tmp, n, size_mb = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
files = sorted(glob.glob(os.path.join(tmp, "ph", "**", "*.dcm"), recursive=True))
part = size_mb * 1000 * 1000 // 2
for u in range(n):
    boundary = uuid.uuid4().hex
    with open(os.path.join(tmp, "body%d" % u), "wb") as out:
        for k in range(2):
            data = open(files[2 * u + k], "rb").read()
            pad = part - len(data) - 12
            pad -= pad % 2
            out.write(b"--" + boundary.encode() + b"\r\nContent-Type: application/dicom\r\n\r\n")
            out.write(data)
            # (FFFC,FFFC) OB, explicit VR little endian: tag, VR, 2 reserved, 4-byte length.
            out.write(struct.pack("<HH2sHI", 0xFFFC, 0xFFFC, b"OB", 0, pad))
            chunk = b"\0" * (1 << 20)
            while pad > 0:
                out.write(chunk[:min(pad, len(chunk))])
                pad -= len(chunk)
            out.write(b"\r\n")
        out.write(b"--" + boundary.encode() + b"--\r\n")
    open(os.path.join(tmp, "boundary%d" % u), "w").write(boundary)
PY
port=$((20000 + RANDOM % 20000))
/usr/bin/time -v -o "$tmp/time.txt" "$bin" serve --data-dir "$tmp/data" --http-addr "127.0.0.1:$port" \
	--grpc-addr "" --dicom-addr "" --settle 1h --max-body $((2 * size_mb * 1000 * 1000)) 2>"$tmp/serve.log" &
pid=$!
for _ in $(seq 100); do curl -sf "http://127.0.0.1:$port/readyz" >/dev/null && break; sleep 0.2; done
start=$(date +%s.%N)
uploads=()
for u in $(seq 0 $((n - 1))); do
	curl -sS -o "$tmp/resp$u" -w "upload $u: HTTP %{http_code}, %{size_upload} bytes in %{time_total} s\n" \
		-H "Content-Type: multipart/related; type=\"application/dicom\"; boundary=$(cat "$tmp/boundary$u")" \
		--data-binary "@$tmp/body$u" "http://127.0.0.1:$port/dicomweb/studies" &
	uploads+=($!)
done
wait "${uploads[@]}"
end=$(date +%s.%N)
echo "$n uploads of $size_mb MB: $(echo "$end - $start" | bc) s wall"
/usr/bin/python3 - "$port" <<'PY'
import socket, sys, time
port = int(sys.argv[1])
def run(name, drip):
    s = socket.create_connection(("127.0.0.1", port))
    t0 = time.time()
    s.sendall(b"POST /v1/studies:score HTTP/1.1\r\nHost: x\r\nContent-Type: application/dicom\r\nContent-Length: 500000000\r\n\r\n")
    s.settimeout(0.2)
    got, last = b"", time.time()
    while time.time() - t0 < 120:
        if drip and time.time() - last >= drip:
            try:
                s.sendall(b"\0")
            except OSError:
                break
            last = time.time()
        try:
            b = s.recv(65536)
        except socket.timeout:
            continue
        except OSError:
            break
        if not b:
            break
        got += b
    print("%s: closed after %.1f s, answer %r" % (name, time.time() - t0, got.split(b"\r\n")[0]))
run("declared 500 MB, sent nothing", 0)
run("one byte every 5 s", 5)
PY
kill -INT "$pid"
wait "$pid" || true
grep -E "Maximum resident set size|Elapsed" "$tmp/time.txt"
