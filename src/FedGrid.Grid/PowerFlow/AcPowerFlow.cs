using FedGrid.Grid.Feeders;

namespace FedGrid.Grid.PowerFlow;

/// <summary>Settings of the exact AC power flow.</summary>
/// <param name="Tolerance">Convergence threshold on the largest change of a complex bus voltage between sweeps, per unit.</param>
/// <param name="MaxIterations">Sweeps before giving up and reporting non-convergence.</param>
public sealed record PowerFlowOptions(double Tolerance = 1e-10, int MaxIterations = 100)
{
    /// <summary>The default settings.</summary>
    public static PowerFlowOptions Default { get; } = new();
}

/// <summary>
/// Exact AC power flow of a radial feeder by the backward/forward sweep (current summation):
/// constant-power loads give bus injection currents, a backward pass sums them into branch
/// currents from the leaves up, and a forward pass updates voltages from the substation down,
/// until the voltages stop moving. Buffers are allocated once in the constructor; <see cref="Solve"/>
/// allocates nothing.
/// </summary>
public sealed class AcPowerFlow
{
    private readonly RadialNetwork _net;
    private readonly PowerFlowOptions _options;
    private readonly double[] _vr, _vi, _jr, _ji;

    /// <summary>Prepares a solver for one network.</summary>
    public AcPowerFlow(RadialNetwork network, PowerFlowOptions? options = null)
    {
        _net = network;
        _options = options ?? PowerFlowOptions.Default;
        int n = network.BusCount;
        _vr = new double[n];
        _vi = new double[n];
        _jr = new double[n];
        _ji = new double[n];
    }

    /// <summary>The network this solver works on.</summary>
    public RadialNetwork Network => _net;

    /// <summary>Solves with the feeder file's own fixed loads (the base case).</summary>
    public PowerFlowResult SolveBaseCase()
    {
        var result = new PowerFlowResult(_net.BusCount);
        Solve(_net.LoadP, _net.LoadQ, result);
        return result;
    }

    /// <summary>
    /// Solves for the given per-unit net loads (consumption positive) at every bus, writing into
    /// <paramref name="result"/>. Returns whether it converged; a failure is also recorded in the result.
    /// </summary>
    public bool Solve(ReadOnlySpan<double> loadP, ReadOnlySpan<double> loadQ, PowerFlowResult result)
    {
        int n = _net.BusCount;
        if (loadP.Length != n || loadQ.Length != n)
            throw new ArgumentException($"expected {n} bus loads, got {loadP.Length} real and {loadQ.Length} reactive");
        if (result.VoltagePu.Length != n)
            throw new ArgumentException($"result is sized for {result.VoltagePu.Length} buses, the network has {n}");

        int[] order = _net.Order;
        int[] parent = _net.Parent;
        double[] r = _net.R, x = _net.X;
        double[] vr = _vr, vi = _vi, jr = _jr, ji = _ji;
        double v0 = _net.SlackVoltagePu;
        vr.AsSpan().Fill(v0);
        vi.AsSpan().Clear();

        bool converged = false;
        int iteration = 0;
        double mismatch = double.PositiveInfinity;
        while (iteration < _options.MaxIterations)
        {
            iteration++;
            InjectionsAndBackwardSweep(loadP, loadQ);
            mismatch = 0;
            for (int k = 1; k < n; k++)
            {
                int i = order[k];
                int p = parent[i];
                double nr = vr[p] - (r[i] * jr[i] - x[i] * ji[i]);
                double ni = vi[p] - (r[i] * ji[i] + x[i] * jr[i]);
                double d = Math.Abs(nr - vr[i]) + Math.Abs(ni - vi[i]);
                if (d > mismatch) mismatch = d;
                vr[i] = nr;
                vi[i] = ni;
            }
            if (!double.IsFinite(mismatch)) break;
            if (mismatch < _options.Tolerance)
            {
                converged = true;
                break;
            }
        }

        // Branch currents consistent with the final voltages.
        InjectionsAndBackwardSweep(loadP, loadQ);
        for (int i = 0; i < n; i++)
        {
            double mag = Math.Sqrt(vr[i] * vr[i] + vi[i] * vi[i]);
            if (mag < 0.3 || !double.IsFinite(mag)) converged = false;
        }

        result.Fill(_net, vr, vi, jr, ji, converged, iteration, mismatch);
        return converged;
    }

    private void InjectionsAndBackwardSweep(ReadOnlySpan<double> loadP, ReadOnlySpan<double> loadQ)
    {
        int n = _net.BusCount;
        int[] order = _net.Order;
        int[] parent = _net.Parent;
        double[] vr = _vr, vi = _vi, jr = _jr, ji = _ji;
        for (int i = 0; i < n; i++)
        {
            // I = conj(S / V) = (p vr + q vi + j (p vi − q vr)) / |V|²
            double m2 = vr[i] * vr[i] + vi[i] * vi[i];
            double p = loadP[i], q = loadQ[i];
            jr[i] = (p * vr[i] + q * vi[i]) / m2;
            ji[i] = (p * vi[i] - q * vr[i]) / m2;
        }
        for (int k = n - 1; k >= 1; k--)
        {
            int i = order[k];
            int pa = parent[i];
            jr[pa] += jr[i];
            ji[pa] += ji[i];
        }
    }
}
