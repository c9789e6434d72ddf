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
say pier07 en-us+m1 160 "The evening ferry will leave from pier four tonight."
say pier08 en-gb+f1 165 "Passengers with cars please follow the green lane."
say pier09 en-gb-scotland+f2 150 "Tickets for the island crossing are sold at the kiosk."
say pier10 en-us+m3 170 "Due to high winds, the eleven o'clock sailing is cancelled."
say pier11 en-gb-x-rp+m2 155 "Please stay seated until the ramp is fully lowered."
say pier12 en-029+f3 160 "The cafe on the upper deck is now open."
say pier13 en-us+f2 165 "Foot passengers may now board through gate three."
say pier14 en-gb+m4 150 "This vessel calls at Harbour Point and Seal Rock."
say pier15 en-gb-scotland+m3 160 "Lost property can be collected at the harbour office."
say pier16 en-us+f1 155 "Welcome aboard. Life jackets are stored under your seat."
say pier17 en-gb-x-rp+f4 170 "The return crossing departs at half past six."
say pier18 en-029+m4 160 "Please do not leave bags unattended on the quay."
{
  echo "id,path,speaker,style"
  echo "pier01,pier01.wav,gb-m3,departure"
  echo "pier02,pier02.wav,us-f3,boarding"
  echo "pier03,pier03.wav,scot-m1,advice"
  echo "pier04,pier04.wav,us-f4,delay"
  echo "pier05,pier05.wav,rp-f2,advice"
  echo "pier06,pier06.wav,car-m2,departure"
  echo "pier07,pier07.wav,us-m1,departure"
  echo "pier08,pier08.wav,gb-f1,advice"
  echo "pier09,pier09.wav,scot-f2,boarding"
  echo "pier10,pier10.wav,us-m3,delay"
  echo "pier11,pier11.wav,rp-m2,advice"
  echo "pier12,pier12.wav,car-f3,advice"
  echo "pier13,pier13.wav,us-f2,boarding"
  echo "pier14,pier14.wav,gb-m4,departure"
  echo "pier15,pier15.wav,scot-m3,advice"
  echo "pier16,pier16.wav,us-f1,boarding"
  echo "pier17,pier17.wav,rp-f4,departure"
  echo "pier18,pier18.wav,car-m4,advice"
} > "$out/manifest.csv"
