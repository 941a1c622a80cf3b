"""The demo's scenario: an invented laboratory, cavity and mirror set.

Everything here is made up for the demonstration and documented as such
(examples/README.md): the Tarnwick Cryogenic Photonics Group does not exist, nor
do the cavity "Kestrel" or its mirror set M-14.  The numbers are chosen to be
plausible for a superconducting microwave cavity at millikelvin temperatures
(a mode near 9.3 GHz, energy lifetimes of tens of milliseconds, so Q of a few
10^9, and a mode hotter than its stage through leaks along the lines) without
reproducing any published experiment.

The story, in three cooldowns of one cavity:

1. ``2031-A`` — the new mirror set M-14 is mounted.  A ring-down of the
   classical field, a raw QND probe record and a photon-number jump record.
2. ``2031-B`` — the mirrors were re-seated after a vacuum leak: the lifetime
   fell, the mode is as warm as before.
3. ``2031-C`` — new low-pass filters and a cold attenuator on the drive line:
   lifetime as in 2031-A, the mode much colder.  On the way down, the fridge
   was held at a few stage temperatures for a jump record at each
   (the thermal budget).

True mode occupation at stage temperature ``T`` (the budget's "stage plus
constant excess" law, with an excess from the lines set by the filtering):
``n_th(T) = n(nu, T) + excess``, ``n(nu, T) = 1 / expm1(h nu / k_B T)``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

__all__ = ["CooldownPlan", "Scenario", "SCENARIO", "scenario_table"]


@dataclass(frozen=True)
class CooldownPlan:
    """One cooldown of the scenario (true values, SI units).

    ``excess_photons`` is the photon number the lines add on top of the
    stage's Planck occupation; ``sweep_k`` the stage temperatures at which a
    jump record was also taken on the way down (warmest first).
    """

    label: str
    start_date: str
    stage_temp_k: float
    lifetime_s: float
    excess_photons: float
    note: str
    sweep_k: tuple[float, ...] = ()
    sweep_quick_k: tuple[float, ...] = ()


@dataclass(frozen=True)
class Scenario:
    """The invented laboratory, cavity, mirror set and what happened to them."""

    lab: str
    cavity: str
    mirror_set: str
    freq_hz: float
    cooldowns: tuple[CooldownPlan, ...]
    #: jump records: length of each record (s)
    jump_duration_s: float = 600.0
    #: raw probe record: probe spacing (s) and length (s), full and quick
    probe_interval_s: float = 4e-3
    probe_duration_s: float = 120.0
    probe_duration_quick_s: float = 32.0
    #: probe response (Ramsey fringe): visibility, readout errors (calibrated)
    probe_visibility: float = 0.88
    probe_error0: float = 0.03
    probe_error1: float = 0.05
    #: ring-down of the classical field (power detector, linear units)
    ringdown_points: int = 600
    ringdown_span_s: float = 0.30
    ringdown_amplitude: float = 1.0
    ringdown_floor: float = 0.004
    ringdown_noise: float = 0.006
    #: the example acceptance spec of the mirror set (TOML)
    spec_toml: str = field(default="")

    def cooldown(self, label: str) -> CooldownPlan:
        """The cooldown plan with this ``label`` (KeyError if the scenario has none)."""
        for plan in self.cooldowns:
            if plan.label == label:
                return plan
        raise KeyError(label)

    def n_thermal(self, plan: CooldownPlan, stage_temp_k: float | None = None) -> float:
        """True thermal photon number in ``plan`` at a stage temperature (default: base)."""
        from cavchar.thermal import planck_occupation

        temp = plan.stage_temp_k if stage_temp_k is None else stage_temp_k
        return float(planck_occupation(self.freq_hz, temp)) + plan.excess_photons

    def effective_temperature(self, plan: CooldownPlan, stage_temp_k: float | None = None
                              ) -> float:
        """True effective mode temperature [K]."""
        from cavchar.thermal import effective_temperature

        return float(effective_temperature(self.freq_hz, self.n_thermal(plan, stage_temp_k)))


_SPEC = """\
# Example acceptance spec of a mirror set (invented for the cavchar demo).
title = "Acceptance of mirror set M-14 in cavity Kestrel (example)"
notes = "Invented numbers for the cavchar demo; write your own from your experiment's needs."

[lifetime]
at_least = "40 ms"
credibility = 0.95

[quality_factor]
at_least = 2.7e9
credibility = 0.95

[thermal_photons]
at_most = 0.02
credibility = 0.9

[effective_temperature]
at_most = "120 mK"
credibility = 0.9
"""

SCENARIO = Scenario(
    lab="Tarnwick Cryogenic Photonics Group (invented)",
    cavity="Kestrel",
    mirror_set="M-14 (niobium on copper, second polishing batch)",
    freq_hz=9.264e9,
    cooldowns=(
        CooldownPlan("2031-A", "2031-03-02", 0.018, 0.046, 0.042,
                     "new mirror set M-14 mounted"),
        CooldownPlan("2031-B", "2031-04-20", 0.019, 0.031, 0.046,
                     "mirrors re-seated after a vacuum leak"),
        CooldownPlan("2031-C", "2031-06-08", 0.015, 0.0475, 0.011,
                     "new low-pass filters and a cold attenuator on the drive line",
                     sweep_k=(0.155, 0.130, 0.105, 0.080), sweep_quick_k=(0.150, 0.110)),
    ),
    spec_toml=_SPEC,
)


def scenario_table(scenario: Scenario = SCENARIO) -> list[dict[str, object]]:
    """The true values of every cooldown, for the report and the README (SI units)."""
    rows = []
    for plan in scenario.cooldowns:
        rows.append({
            "cooldown": plan.label, "start_date": plan.start_date,
            "stage_temp_k": plan.stage_temp_k, "lifetime_s": plan.lifetime_s,
            "n_thermal": scenario.n_thermal(plan),
            "effective_temperature_k": scenario.effective_temperature(plan),
            "excess_photons": plan.excess_photons, "note": plan.note,
        })
    return rows
