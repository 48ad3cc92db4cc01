using System.Security.Cryptography;
using FedGrid.Grid.Feeders;
using FedGrid.Households;
using FedGrid.Households.Scenarios;

namespace FedGrid.Federation.Runs;

/// <summary>
/// SHA-256 fingerprints written into a transcript's header. Feeder: the bytes of its feeder file
/// (<see cref="FeederFile.Write(Feeder, Stream)"/>). Scenario: the bytes of its scenario file
/// (<see cref="ScenarioFile.Write"/>, feeder referenced by name) followed by every household trace in order — per slot
/// base kW, occupancy, hot-water litres and curtailable desired kW as little-endian binary64 (occupancy 0/1), then each
/// charging session's arrival, deadline (int32) and energy (binary64), then the initial tank temperature.
/// </summary>
public static class RunHashes
{
    /// <summary>SHA-256 of the feeder.</summary>
    /// <param name="feeder">The feeder.</param>
    /// <returns>32 bytes.</returns>
    public static byte[] Feeder(Feeder feeder)
    {
        ArgumentNullException.ThrowIfNull(feeder);
        using var ms = new MemoryStream();
        FeederFile.Write(feeder, ms);
        return SHA256.HashData(ms.ToArray());
    }

    /// <summary>SHA-256 of the scenario (parameters and traces).</summary>
    /// <param name="scenario">The scenario.</param>
    /// <returns>32 bytes.</returns>
    public static byte[] Scenario(Scenario scenario)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        using var ms = new MemoryStream();
        ScenarioFile.Write(scenario, scenario.Feeder.Name, ms);
        using (var w = new BinaryWriter(ms, System.Text.Encoding.UTF8, leaveOpen: true))
        {
            foreach (HouseholdTrace t in scenario.Traces)
            {
                for (int s = 0; s < t.SlotCount; s++)
                {
                    w.Write(t.BaseKw[s]);
                    w.Write(t.Occupied[s] ? 1.0 : 0.0);
                    w.Write(t.HotWaterLitres[s]);
                    w.Write(t.CurtailableDesiredKw[s]);
                }
                foreach (ChargingSession c in t.Sessions)
                {
                    w.Write(c.ArrivalSlot);
                    w.Write(c.DeadlineSlot);
                    w.Write(c.EnergyKwh);
                }
                w.Write(t.InitialTankC);
            }
        }
        return SHA256.HashData(ms.ToArray());
    }

    /// <summary>SHA-256 of a model: the actor's flat parameters then the critic's, each float as its 4 little-endian IEEE-754 bytes (the same bytes give the same hash on every platform).</summary>
    /// <param name="actor">Actor parameters.</param>
    /// <param name="critic">Critic parameters.</param>
    /// <returns>32 bytes.</returns>
    public static byte[] Model(ReadOnlySpan<float> actor, ReadOnlySpan<float> critic)
    {
        var bytes = new byte[4 * (actor.Length + critic.Length)];
        for (int i = 0; i < actor.Length; i++)
        {
            System.Buffers.Binary.BinaryPrimitives.WriteSingleLittleEndian(bytes.AsSpan(4 * i), actor[i]);
        }
        for (int i = 0; i < critic.Length; i++)
        {
            System.Buffers.Binary.BinaryPrimitives.WriteSingleLittleEndian(bytes.AsSpan(4 * (actor.Length + i)), critic[i]);
        }
        return SHA256.HashData(bytes);
    }
}
