#!/usr/bin/env python3
"""A hand-written low-temperature-shift monitor over MQTT, the way a user might write
one without eqwatch: the yardstick beside eqwatch in benches/e2e.rs. Not a pass/fail
test, and not part of eqwatch.

    .venv-bench/bin/python benches/python/lts_subscriber.py --port 1883

Subscribes (QoS 1) to `<in>/+/ai` (multi-component analyser, dry basis, mol %),
`<in>/+/ti` (thermocouple, degC) and `<in>/+/pi` (pressure, barg), keeps the latest
temperature and pressure per reactor, and for every analysis publishes one result
(QoS 1, not retained) on `<out>/<reactor>/result`:

- wet mole fractions from the dry analysis and a fixed steam-to-dry-gas ratio;
- Q = y_CO2 y_H2 / (y_CO y_H2O) for CO + H2O = CO2 + H2 (ideal gas; the moles do not
  change, so pressure cancels);
- ln K(T) = -sum nu_i g°_i(T)/RT from Cantera's gri30 species thermo (NASA
  7-coefficient polynomials; Cantera 3.2.0);
- T_eq with ln K(T_eq) = ln Q (Newton on d ln K/dT = dH°/RT², bracketed), and the
  temperature approach T_eq - T (the shift is exothermic: positive = short of
  equilibrium).

It does no uncertainty, no drift statistics, alarms, journal or quality checks: a
smaller job than eqwatch's. Prints `ready` on stdout once subscribed, and announces
`{"state": "online"}` (retained) on `<out>/status`.
"""

import argparse
import datetime
import json
import math
import signal
import sys
import traceback

import cantera as ct
import paho.mqtt.client as mqtt

# Compact JSON, as eqwatch writes it (and as the harness reads it).
SEP = (",", ":")
REACTION = {"CO": -1.0, "H2O": -1.0, "CO2": 1.0, "H2": 1.0}


class ShiftK:
    """ln K(T) and d ln K/dT of the shift from Cantera's gri30 species data."""

    def __init__(self):
        species = {s.name: s for s in ct.Species.list_from_file("gri30.yaml")}
        names = list(REACTION)
        self.gas = ct.Solution(thermo="ideal-gas", species=[species[n] for n in names])
        self.nu = [REACTION[n] for n in self.gas.species_names]

    def ln_k(self, t_k):
        self.gas.TP = t_k, ct.one_atm
        g = self.gas.standard_gibbs_RT
        h = self.gas.standard_enthalpies_RT
        ln_k = -sum(v * x for v, x in zip(self.nu, g))
        dln_k_dt = sum(v * x for v, x in zip(self.nu, h)) / t_k
        return ln_k, dln_k_dt

    def t_eq(self, ln_q, t_guess):
        """Solves ln K(T) = ln Q between 250 K and 1500 K; None outside."""
        lo, hi = 250.0, 1500.0
        t = min(max(t_guess, lo), hi)
        for _ in range(50):
            f, df = self.ln_k(t)
            f -= ln_q
            if abs(f) < 1e-10:
                return t
            # ln K falls with T (exothermic): f > 0 means T_eq is above t.
            if f > 0:
                lo = t
            else:
                hi = t
            step = t - f / df if df != 0 else None
            t = step if step is not None and lo < step < hi else 0.5 * (lo + hi)
            if hi - lo < 1e-9:
                return t
        return None


def rfc3339_ms(ms):
    t = datetime.datetime.fromtimestamp(ms / 1000.0, tz=datetime.timezone.utc)
    return t.strftime("%Y-%m-%dT%H:%M:%S.") + f"{int(ms) % 1000:03d}Z"


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--host", default="127.0.0.1")
    ap.add_argument("--port", type=int, default=1883)
    ap.add_argument("--in-prefix", default="e2e-py")
    ap.add_argument("--out-prefix", default="eqwatch-py/bench")
    ap.add_argument("--steam-ratio", type=float, default=0.36, help="mol steam per mol dry gas")
    ap.add_argument("--inflight", type=int, default=64, help="QoS 1 publishes in flight")
    args = ap.parse_args()

    k = ShiftK()
    latest_t = {}  # reactor -> K
    latest_p = {}  # reactor -> bar absolute
    wet = 1.0 / (1.0 + args.steam_ratio)
    y_h2o = args.steam_ratio / (1.0 + args.steam_ratio)
    status = f"{args.out_prefix}/status"
    counts = {"analyses": 0, "results": 0, "publish_errors": 0}

    client = mqtt.Client(
        mqtt.CallbackAPIVersion.VERSION2,
        client_id=f"lts-py-{args.port}",
        protocol=mqtt.MQTTv311,
    )
    client.max_inflight_messages_set(args.inflight)
    client.max_queued_messages_set(0)
    subs = [(f"{args.in_prefix}/+/{t}", 1) for t in ("ai", "ti", "pi")]

    def on_connect(c, _userdata, flags, reason, _props):
        if reason.is_failure:
            print(f"connect refused: {reason}", file=sys.stderr, flush=True)
            return
        print(f"connected (session present: {flags.session_present})", file=sys.stderr, flush=True)
        c.subscribe(subs)

    def on_subscribe(c, _userdata, _mid, _codes, _props):
        c.publish(status, json.dumps({"state": "online"}, separators=SEP), qos=1, retain=True)
        print("ready", flush=True)

    def on_message(c, userdata, msg):
        try:
            handle(c, msg)
        except Exception:  # a bad message must not end the loop
            traceback.print_exc()

    def handle(c, msg):
        parts = msg.topic.split("/")
        if len(parts) < 3:
            return
        reactor, kind = parts[-2], parts[-1]
        try:
            m = json.loads(msg.payload)
        except ValueError:
            return
        if kind == "ti":
            latest_t[reactor] = float(m["value"]) + 273.15
            return
        if kind == "pi":
            latest_p[reactor] = float(m["value"]) + 1.01325
            return
        counts["analyses"] += 1
        t_k = latest_t.get(reactor)
        if t_k is None:
            return
        v = m["values"]
        dry = sum(v.values())
        y = {n: v.get(n, 0.0) / dry * wet for n in ("CO", "CO2", "H2")}
        result = {
            "reactor": reactor,
            "analysis_ts": rfc3339_ms(m["ts"]),
            "temperature_k": t_k,
            "pressure_bar": latest_p.get(reactor),
            "quality": "good",
        }
        if min(y.values()) <= 0.0:
            result.update(quality="bad", approach_k=None)
        else:
            ln_q = math.log(y["CO2"] * y["H2"] / (y["CO"] * y_h2o))
            ln_k, _ = k.ln_k(t_k)
            t_eq = k.t_eq(ln_q, t_k)
            result.update(
                ln_q=ln_q,
                ln_k=ln_k,
                equilibrium_temperature_k=t_eq,
                approach_k=None if t_eq is None else t_eq - t_k,
            )
            if t_eq is None:
                result["quality"] = "bad"
        info = c.publish(f"{args.out_prefix}/{reactor}/result", json.dumps(result, separators=SEP), qos=1)
        if info.rc == mqtt.MQTT_ERR_SUCCESS:
            counts["results"] += 1
        else:
            counts["publish_errors"] += 1
            if counts["publish_errors"] == 1:
                print(f"publish refused: {mqtt.error_string(info.rc)}", file=sys.stderr, flush=True)

    def on_disconnect(_c, _userdata, _flags, reason, _props):
        print(f"disconnected: {reason}", file=sys.stderr, flush=True)

    client.on_connect = on_connect
    client.on_disconnect = on_disconnect
    client.on_subscribe = on_subscribe
    client.on_message = on_message
    client.will_set(status, json.dumps({"state": "offline"}, separators=SEP), qos=1, retain=True)
    def on_term(_sig, _frame):
        # The counts go to stderr (the harness keeps it as e2e-python.log).
        print(f"counts: {counts}", file=sys.stderr, flush=True)
        sys.exit(0)

    signal.signal(signal.SIGTERM, on_term)
    client.connect(args.host, args.port, keepalive=30)
    try:
        client.loop_forever()
    except KeyboardInterrupt:
        pass


if __name__ == "__main__":
    main()
