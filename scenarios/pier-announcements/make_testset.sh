#!/usr/bin/env bash
# Builds the demo test set: short departure announcements for an invented ferry operator, spoken by
# espeak-ng in several voices, 22.05 kHz mono 16-bit. Needs: apt-get install -y espeak-ng sox.
# The generated files are committed; CI does not run this script.
set -euo pipefail
cd "$(dirname "$0")"
out=testset
mkdir -p "$out"
say() {  # id voice speed text
  espeak-ng -v "$2" -s "$3" -w "$out/$1.tmp.wav" "$4"
  sox "$out/$1.tmp.wav" -r 22050 -c 1 -b 16 "$out/$1.wav" norm -3 silence 1 0.02 0.5% reverse silence 1 0.02 0.5% reverse pad 0.1 0.1
  rm "$out/$1.tmp.wav"
}
say pier01 en-gb+m3 165 "The ferry to Gull Island departs from pier two."
say pier02 en-us+f3 160 "Boarding for the seven fifteen crossing is now open."
say pier03 en-gb-scotland+m1 155 "Please keep your ticket ready at the gate."
say pier04 en-us+f4 170 "The harbour shuttle is delayed by ten minutes."
say pier05 en-gb-x-rp+f2 160 "Cyclists board at the rear ramp, please."
say pier06 en-029+m2 150 "Last call for passengers to North Quay."
{
  echo "id,path,speaker,style"
  echo "pier01,pier01.wav,gb-m3,departure"
  echo "pier02,pier02.wav,us-f3,boarding"
  echo "pier03,pier03.wav,scot-m1,advice"
  echo "pier04,pier04.wav,us-f4,delay"
  echo "pier05,pier05.wav,rp-f2,advice"
  echo "pier06,pier06.wav,car-m2,departure"
} > "$out/manifest.csv"
