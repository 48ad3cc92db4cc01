namespace FedGrid.Grid.Feeders;

/// <summary>Checks a feeder description and derives its per-unit radial network.</summary>
internal static class FeederValidator
{
    // Bounds beyond which a value is taken as a typing or unit mistake (common practice for
    // distribution feeders: up to 69 kV sub-transmission, loads far below 100 MW per bus).
    private const double MaxBaseKv = 500;
    private const double MaxLoadKw = 1e6;
    private const double MaxOhm = 1e4;
    private const double MaxAmpacityA = 1e5;

    public static Feeder Build(string name, IReadOnlyList<Bus> buses, IReadOnlyList<Line> lines, Substation? substation,
        double baseMva, string? source, string? fileName, Func<RadialNetwork, Dictionary<string, int>, Feeder> make)
    {
        var problems = new List<FeederProblem>();
        string prefix = fileName is null ? "" : fileName + ": ";
        void Add(string path, string message) => problems.Add(new FeederProblem(prefix + path, message));

        if (!(baseMva > 0 && baseMva < 1e4))
            Add("$.baseMva", $"power base must be positive and below 10000 MVA, got {baseMva}");
        if (buses.Count == 0)
            Add("$.buses", "the feeder has no buses");

        var index = new Dictionary<string, int>(StringComparer.Ordinal);
        for (int i = 0; i < buses.Count; i++)
        {
            Bus b = buses[i];
            string at = $"$.buses[{i}]";
            if (string.IsNullOrWhiteSpace(b.Id))
            {
                Add(at + ".id", "bus id is missing or empty");
                continue;
            }
            if (!index.TryAdd(b.Id, i))
                Add(at + ".id", $"duplicate bus id '{b.Id}' (first defined at $.buses[{index[b.Id]}])");
            if (!(b.BaseKv > 0 && b.BaseKv <= MaxBaseKv))
                Add(at + ".baseKv", $"base voltage must be in (0, {MaxBaseKv}] kV, got {b.BaseKv}");
            if (!double.IsFinite(b.LoadPkW) || Math.Abs(b.LoadPkW) > MaxLoadKw)
                Add(at + ".loadKw", $"real load must be finite and at most {MaxLoadKw} kW in magnitude, got {b.LoadPkW}");
            if (!double.IsFinite(b.LoadQkvar) || Math.Abs(b.LoadQkvar) > MaxLoadKw)
                Add(at + ".loadKvar", $"reactive load must be finite and at most {MaxLoadKw} kvar in magnitude, got {b.LoadQkvar}");
            if (!(b.VMinPu >= 0.5 && b.VMinPu < 1.5))
                Add(at + ".vMinPu", $"lower voltage limit must be in [0.5, 1.5) pu, got {b.VMinPu}");
            if (!(b.VMaxPu > 0.5 && b.VMaxPu <= 1.5))
                Add(at + ".vMaxPu", $"upper voltage limit must be in (0.5, 1.5] pu, got {b.VMaxPu}");
            if (b.VMinPu >= b.VMaxPu)
                Add(at, $"lower voltage limit {b.VMinPu} pu is not below the upper limit {b.VMaxPu} pu");
        }

        if (substation is null)
            Add("$.substation", "the feeder has no substation (slack bus)");
        else
        {
            if (string.IsNullOrWhiteSpace(substation.SlackBus) || !index.ContainsKey(substation.SlackBus))
                Add("$.substation.bus", $"substation bus '{substation.SlackBus}' is not a bus of the feeder");
            if (!(substation.VoltageSetpointPu >= 0.8 && substation.VoltageSetpointPu <= 1.2))
                Add("$.substation.voltagePu", $"substation voltage setpoint must be in [0.8, 1.2] pu, got {substation.VoltageSetpointPu}");
            if (!(substation.ImportLimitKw > 0 && substation.ImportLimitKw <= MaxLoadKw * 10))
                Add("$.substation.importLimitKw", $"import limit must be positive and finite, got {substation.ImportLimitKw}");
        }

        // Line checks and topology (union-find for loops, adjacency for islands).
        int n = buses.Count;
        var uf = new int[n];
        for (int i = 0; i < n; i++) uf[i] = i;
        int Find(int a) { while (uf[a] != a) { uf[a] = uf[uf[a]]; a = uf[a]; } return a; }
        var adjacency = new List<(int Other, int Line)>[n];
        for (int i = 0; i < n; i++) adjacency[i] = new List<(int, int)>(2);

        for (int k = 0; k < lines.Count; k++)
        {
            Line l = lines[k];
            string at = $"$.lines[{k}]";
            bool fromOk = index.TryGetValue(l.From ?? "", out int f);
            bool toOk = index.TryGetValue(l.To ?? "", out int t);
            if (!fromOk) Add(at + ".from", $"unknown bus '{l.From}'");
            if (!toOk) Add(at + ".to", $"unknown bus '{l.To}'");
            if (!(l.ROhm > 0 && l.ROhm <= MaxOhm))
                Add(at + ".rOhm", $"resistance must be positive and at most {MaxOhm} ohm, got {l.ROhm}");
            if (!(l.XOhm >= 0 && l.XOhm <= MaxOhm))
                Add(at + ".xOhm", $"reactance must be non-negative and at most {MaxOhm} ohm, got {l.XOhm}");
            if (!(l.AmpacityA > 0 && l.AmpacityA <= MaxAmpacityA))
                Add(at + ".ampacityA", $"ampacity must be positive and at most {MaxAmpacityA} A, got {l.AmpacityA}");
            if (!fromOk || !toOk) continue;
            if (f == t)
            {
                Add(at, $"line joins bus '{l.From}' to itself");
                continue;
            }
            if (buses[f].BaseKv != buses[t].BaseKv)
                Add(at, $"line joins buses of different base voltage ({buses[f].BaseKv} kV and {buses[t].BaseKv} kV); transformers inside the feeder are not modelled");
            int rf = Find(f), rt = Find(t);
            if (rf == rt)
            {
                Add(at, $"line '{l.From}'–'{l.To}' closes a loop: the feeder is meshed, and only radial feeders are supported");
                continue;
            }
            uf[rf] = rt;
            adjacency[f].Add((t, k));
            adjacency[t].Add((f, k));
        }

        if (problems.Count > 0)
            throw new FeederValidationException(problems);

        int slack = index[substation!.SlackBus];
        var parent = new int[n];
        var parentLine = new int[n];
        Array.Fill(parent, -2);
        parent[slack] = -1;
        parentLine[slack] = -1;
        var order = new int[n];
        int head = 0, tail = 0;
        order[tail++] = slack;
        while (head < tail)
        {
            int u = order[head++];
            foreach (var (v, k) in adjacency[u])
            {
                if (parent[v] != -2) continue;
                parent[v] = u;
                parentLine[v] = k;
                order[tail++] = v;
            }
        }
        if (tail < n)
        {
            var islanded = Enumerable.Range(0, n).Where(i => parent[i] == -2).ToList();
            foreach (int i in islanded.Take(10))
                Add($"$.buses[{i}]", $"bus '{buses[i].Id}' is not connected to the substation bus '{substation.SlackBus}' (island)");
            if (islanded.Count > 10)
                Add("$.buses", $"… and {islanded.Count - 10} more islanded buses");
            throw new FeederValidationException(problems);
        }

        var r = new double[n];
        var x = new double[n];
        var iMax = new double[n];
        var loadP = new double[n];
        var loadQ = new double[n];
        var vMin = new double[n];
        var vMax = new double[n];
        var baseKv = new double[n];
        var iBase = new double[n];
        double sBaseKva = baseMva * 1000.0;
        for (int i = 0; i < n; i++)
        {
            Bus b = buses[i];
            baseKv[i] = b.BaseKv;
            double zBase = b.BaseKv * b.BaseKv / baseMva;
            iBase[i] = sBaseKva / (Math.Sqrt(3) * b.BaseKv);
            loadP[i] = b.LoadPkW / sBaseKva;
            loadQ[i] = b.LoadQkvar / sBaseKva;
            vMin[i] = b.VMinPu;
            vMax[i] = b.VMaxPu;
            if (parent[i] < 0)
            {
                iMax[i] = double.PositiveInfinity;
                continue;
            }
            Line l = lines[parentLine[i]];
            r[i] = l.ROhm / zBase;
            x[i] = l.XOhm / zBase;
            iMax[i] = l.AmpacityA / iBase[i];
        }

        var net = new RadialNetwork(slack, order, parent, parentLine, r, x, iMax, loadP, loadQ, vMin, vMax, baseKv, iBase,
            substation.VoltageSetpointPu, substation.ImportLimitKw / sBaseKva, baseMva);
        return make(net, index);
    }
}
