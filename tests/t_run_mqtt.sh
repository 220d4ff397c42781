#!/bin/sh
# End-to-end for `quadwatch run` with an MQTT input (a real mosquitto):
# formats, alerts on both buses, malformed payloads, broker restart.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_mqtt.py
