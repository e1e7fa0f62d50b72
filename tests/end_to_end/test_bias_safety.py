"""DC-bias safety with no hole: a bounded current limit, the source's own maximum checked,
a source left on found and switched off, its own protection used, a cut link leaving
0 V and the output off, an unconfirmed "off" that says so on stderr with exit 4, and a
termination request or a closed terminal stopping a biased run as Ctrl-C does."""

from __future__ import annotations

import os
import signal

import pytest

from bench.errors import BiasNotConfirmedOffError, RunError
from bench.procedure.loader import ProcedureErrors
from bench.procedure.plan import plan_from_text


def _biased(kit) -> str:
    text = kit.SMALL.replace("samples: 2}", "samples: 1, bias: [0 V, 3 V]}")
    return "\n".join(line for line in text.splitlines() if "PB345" not in line) + "\n"


def test_a_current_limit_without_the_sources_maximum_is_refused_at_check(kit):
    # Before: `current_limit: 10 A` with no max_current passed check and the run sent
    # SOURce:CURRent:LEVel 10.
    text = _biased(kit).replace("max_current: 20 mA, ", "").replace("10 mA}", "10 A}")
    with pytest.raises(ProcedureErrors, match=r"needs dc_source\.max_current"):
        plan_from_text(text, "p.yaml")
    above = _biased(kit).replace("current_limit: 10 mA", "current_limit: 10 A")
    with pytest.raises(ProcedureErrors) as info:
        plan_from_text(above, "p.yaml")
    assert info.value.key == "bias.current_limit"
    assert "above dc_source.max_current 20" in str(info.value)


def test_a_stated_maximum_the_source_contradicts_stops_the_run(tmp_path, sim, kit):
    # The simulated source reports 20 V as its maximum; the procedure says 30 V.
    text = _biased(kit).replace("max_voltage: 20 V", "max_voltage: 30 V")
    plan, store = kit.start_run(tmp_path, text)
    with pytest.raises(RunError, match="reports a maximum of 20 V"):
        kit.run_on(sim, plan, store)
    assert sim.state.bias.output is False
    assert not list((store.root / "raw").glob("*_3V.s2p")), "nothing biased was measured"


def test_a_source_found_on_is_reported_and_switched_off_and_protection_set(tmp_path, sim, kit):
    # Left on by a killed process: 3 V on the output before the run starts.
    state = sim.state
    with state.lock:
        state.bias.change(state.now(), setpoint=3.0, output=True)
    plan, store = kit.start_run(tmp_path, _biased(kit))
    lines: list[str] = []
    kit.run_on(sim, plan, store, lines=lines)
    assert any("found with its output ON (set to 3 V)" in line for line in lines), lines
    assert any("found on at the start" in w for w in store.manifest["warnings"])
    assert store.manifest["state"] == "complete"
    assert state.bias.output is False
    # The instrument's own over-voltage protection sits at the run's limit: the part's
    # 6.3 V rating is the lowest of its limits here.
    assert sim.instruments["dc_source"].protection == pytest.approx(6.3)
    assert store.manifest["dc_protection"] == ["over-voltage protection 6.3 V"]


def _saboteur(command: str):
    from bench.procedure.operators import ScriptedOperator

    class Saboteur(ScriptedOperator):
        def load_parts(self, placements):
            super().load_parts(placements)
            self.bench.write_checked(command)

    return lambda bench: Saboteur(bench)


def test_cut_link_while_biased_sets_zero_and_off_on_a_new_connection(tmp_path, sim, kit):
    # Before: the new connection switched the output off but left the set-point at the
    # bias voltage, to come back the moment someone switched the output on.
    plan, store = kit.start_run(tmp_path, _biased(kit))
    with pytest.raises(RunError):
        kit.run_on(sim, plan, store, operator=_saboteur("FAULt:DROP dc_source,3"))
    assert sim.state.bias.output is False
    assert sim.state.bias.setpoint == 0.0
    log = (store.root / "log").read_text(encoding="utf-8")
    assert "switched off and set to 0 V on a new connection" in log


@pytest.mark.usefixtures("default_signals")
@pytest.mark.parametrize("first", [signal.SIGTERM, signal.SIGHUP], ids=["SIGTERM", "SIGHUP"])
def test_a_termination_request_while_biased_ramps_down_and_switches_off(
    tmp_path, sim, kit, monkeypatch, capfd, first
):
    # Before: SIGTERM (kill, a service manager stopping the job) or SIGHUP (the terminal
    # closed) ended the process at once, the output left on at the bias voltage and the
    # part charged. Now the run stops as on Ctrl-C, and a Ctrl-C pressed during the
    # ramp-down that follows does not cut it short.
    plan, store = kit.start_run(tmp_path, _biased(kit))
    source = sim.instruments["dc_source"]
    original = source.execute
    sent: list[int] = []
    after: list[tuple[float, bool]] = []  # (set-point, output on) after the request

    def execute(session, text):
        out = original(session, text)
        bias = sim.state.bias
        if sent:
            after.append((bias.setpoint, bias.output))
        if not sent and bias.output and bias.setpoint >= 3.0:
            sent.append(first)  # the bias is up: the request arrives
            os.kill(os.getpid(), first)
        elif len(sent) == 1 and bias.output and 0.0 < bias.setpoint < 3.0:
            sent.append(signal.SIGINT)  # ramping down: someone presses Ctrl-C as well
            os.kill(os.getpid(), signal.SIGINT)
        return out

    monkeypatch.setattr(source, "execute", execute)
    name = signal.Signals(first).name
    with pytest.raises(RunError, match=f"stopped by {name}"):
        kit.run_on(sim, plan, store)
    assert sent == [first, signal.SIGINT]
    # Ramped down with the output on, then switched off (the exchange the signal cut
    # short was cleared from the link, not read as the answer to the ramp's first query).
    assert any(0.0 < volts < 3.0 and on for volts, on in after), after
    assert after[-1] == (0.0, False), after
    assert sim.state.bias.output is False
    assert sim.state.bias.setpoint == 0.0
    log = (store.root / "log").read_text(encoding="utf-8")
    assert f"stopped by {name}" in log
    assert "DC bias output is OFF" in log
    assert "SIGINT ignored: the run is stopping" in capfd.readouterr().err
    _, again = kit.reopen(store)
    assert again.manifest["state"] == "stopped"
    assert signal.getsignal(first) is signal.SIG_DFL


def test_an_unconfirmed_output_off_goes_to_stderr_with_its_own_status(
    tmp_path, sim, kit, monkeypatch, capsys
):
    import drivers.transport
    from drivers.errors import ConnectionFailed

    plan, store = kit.start_run(tmp_path, _biased(kit))

    def refuse(*args, **kwargs):
        raise ConnectionFailed("refused (test)")

    original = drivers.transport.VisaTransport.open

    class Hands:
        def __call__(self, bench):
            from bench.procedure.operators import ScriptedOperator

            class Cutter(ScriptedOperator):
                def load_parts(self, placements):
                    super().load_parts(placements)
                    self.bench.write_checked("FAULt:DROP dc_source,3")
                    # From here on no new connection can be made.
                    monkeypatch.setattr(drivers.transport.VisaTransport, "open", refuse)

            return Cutter(bench)

    with pytest.raises(BiasNotConfirmedOffError) as info:
        kit.run_on(sim, plan, store, operator=Hands())
    monkeypatch.setattr(drivers.transport.VisaTransport, "open", original)
    assert info.value.exit_code == 4
    assert "could not confirm the DC source output is off" in str(info.value)
    assert f"zbench run --resume {store.root}" in str(info.value)
    err = capsys.readouterr().err
    assert "could not confirm the DC source output is off" in err
    assert "could not confirm" in store.manifest["dc_output_unconfirmed"]


def test_check_instruments_reports_a_source_left_on_and_switches_it_off(tmp_path, sim, kit, capsys):
    from bench.cli import main

    state = sim.state
    with state.lock:
        state.bias.change(state.now(), setpoint=4.0, output=True)
    text = _biased(kit)
    for role, resource in sim.resources.items():
        text = text.replace(f"  {role}: {{", f"  {role}: {{resource: '{resource}', ", 1)
    path = kit.write_procedure(tmp_path, text)
    assert main(["check", str(path), "--instruments", "--yes"]) == 0
    out = capsys.readouterr()
    assert "its output is ON (set to 4 V)" in out.err
    assert "reports a maximum of 20 V; the procedure states 20 V" in out.out
    assert "output switched off and set to 0 V" in out.out
    assert state.bias.output is False and state.bias.setpoint == 0.0
