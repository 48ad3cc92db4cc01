namespace FedGrid.Grid.Optimization;

/// <summary>
/// Fill-reducing ordering of a symmetric sparsity pattern by the minimum degree heuristic
/// (Tinney scheme 2; George &amp; Liu, "The evolution of the minimum degree ordering algorithm",
/// SIAM Review 1989), on an explicit elimination graph: repeatedly eliminate a node of least
/// current degree and join its neighbours into a clique. Ties go to the lowest node index, so the
/// ordering is deterministic. On a tree it eliminates leaves first and creates no fill, which is
/// what a radial feeder's KKT system nearly is. Run once per sparsity pattern (it allocates).
/// </summary>
internal static class MinimumDegreeOrdering
{
    /// <summary>
    /// Returns perm with perm[k] = the original index eliminated k-th. The pattern is given as
    /// adjacency lists (self-loops and duplicates ignored).
    /// </summary>
    public static int[] Compute(int n, IReadOnlyList<IEnumerable<int>> neighbours)
    {
        var adj = new HashSet<int>[n];
        for (int i = 0; i < n; i++) adj[i] = [];
        for (int i = 0; i < n; i++)
            foreach (int j in neighbours[i])
            {
                if (j == i) continue;
                adj[i].Add(j);
                adj[j].Add(i);
            }
        var queue = new PriorityQueue<int, (int Degree, int Node)>(n);
        for (int i = 0; i < n; i++) queue.Enqueue(i, (adj[i].Count, i));
        var eliminated = new bool[n];
        var perm = new int[n];
        var nb = new List<int>();
        int k = 0;
        while (queue.TryDequeue(out int v, out var pri))
        {
            if (eliminated[v] || pri.Degree != adj[v].Count) continue;
            eliminated[v] = true;
            perm[k++] = v;
            nb.Clear();
            nb.AddRange(adj[v]);
            foreach (int u in nb) adj[u].Remove(v);
            for (int a = 0; a < nb.Count; a++)
                for (int b = a + 1; b < nb.Count; b++)
                {
                    if (adj[nb[a]].Add(nb[b])) adj[nb[b]].Add(nb[a]);
                }
            foreach (int u in nb) queue.Enqueue(u, (adj[u].Count, u));
            adj[v].Clear();
        }
        return perm;
    }
}
