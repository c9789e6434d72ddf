#!/usr/bin/env bash
# Makes the two short speech recordings used by the pitch and quality tests (self-made, no
# third-party recording): eSpeak NG formant synthesis of our own sentences, converted with SoX to
# 16 kHz mono 16-bit PCM and normalised to a peak of -1 dBFS.
#   apt-get install -y espeak-ng sox      (made with eSpeak NG 1.51 and SoX 14.4.2)
# Re-running it rewrites the files; tests only read them, so a different eSpeak NG version giving
# slightly different audio is harmless.
set -euo pipefail
cd "$(dirname "$0")"
make() {   # voice, words per minute, output, text
  espeak-ng -v "$1" -s "$2" -w "$3.raw.wav" "$4"
  sox "$3.raw.wav" -r 16000 -c 1 -b 16 "$3" norm -1
  rm -f "$3.raw.wav"
}
make en-us 150 speech_male.wav "The pier lights came on early, and the ferry waited by the harbour wall."
make en-us+f3 150 speech_female.wav "Seven small boats sailed home slowly, while the evening bell was ringing."
