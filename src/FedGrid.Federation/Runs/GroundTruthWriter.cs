using System.Globalization;
using System.Text;

namespace FedGrid.Federation.Runs;

/// <summary>
/// The simulator's own record of every household's true state per slot — SIMULATION ONLY, for scoring attacks; a
/// deployment has no such file and nothing on the coordinator's side reads it. CSV (<see cref="FileName"/>): comment lines
/// starting with '#', then the header <see cref="Header"/> and one row per slot and household (kW, $; occupancy 0/1).
/// </summary>
public sealed class GroundTruthWriter : IDisposable
{
    /// <summary>File name in the run folder.</summary>
    public const string FileName = "ground-truth.simulation-only.csv";

    /// <summary>Column header.</summary>
    public const string Header = "step,day,household,index,bus,baseKw,flexMinKw,flexDesiredKw,occupied,proposalKw,setpointKw,costDollars";

    private readonly StreamWriter _writer;
    private readonly StringBuilder _line = new(128);

    /// <summary>Creates the file and writes the warning and the header.</summary>
    /// <param name="path">File path.</param>
    public GroundTruthWriter(string path)
    {
        _writer = new StreamWriter(path, false, new UTF8Encoding(false), 1 << 16);
        _writer.WriteLine("# SIMULATION ONLY - the simulator's true household states, for scoring reconstructions.");
        _writer.WriteLine("# Not part of the protocol: the coordinator never sees or reads this file. Invented demo data.");
        _writer.WriteLine(Header);
    }

    /// <summary>Writes one household's row of one slot.</summary>
    /// <param name="step">Decision step.</param>
    /// <param name="day">Day, 1-based.</param>
    /// <param name="household">Household id.</param>
    /// <param name="index">Block index.</param>
    /// <param name="bus">Bus id.</param>
    /// <param name="baseKw">Base load, kW.</param>
    /// <param name="flexMinKw">Least flexible power, kW.</param>
    /// <param name="flexDesiredKw">Desired flexible power, kW.</param>
    /// <param name="occupied">Someone at home.</param>
    /// <param name="proposalKw">The household's proposal, kW.</param>
    /// <param name="setpointKw">Applied setpoint, kW.</param>
    /// <param name="cost">Bill + discomfort of the slot, $.</param>
    public void Write(long step, int day, string household, int index, string bus, double baseKw, double flexMinKw, double flexDesiredKw,
        bool occupied, double proposalKw, double setpointKw, double cost)
    {
        _line.Clear();
        _line.Append(CultureInfo.InvariantCulture, $"{step},{day},{household},{index},{bus},{baseKw:R},{flexMinKw:R},{flexDesiredKw:R},{(occupied ? 1 : 0)},{proposalKw:R},{setpointKw:R},{cost:R}");
        _writer.WriteLine(_line);
    }

    /// <summary>Flushes and closes.</summary>
    public void Dispose() => _writer.Dispose();
}
