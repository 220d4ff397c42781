#!/bin/sh
# End-to-end for `quadwatch run` and MQTT security: credentials from a file
# (right and wrong), TLS with a CA and client certificate made by openssl.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_mqtt_secure.py
