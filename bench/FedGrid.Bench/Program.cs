using BenchmarkDotNet.Running;
using FedGrid.Bench.Versus;

// `versus-reference [--json] [--repeat N] [--case NAME]`: side-by-side runs against SciPy/CVXOPT.
// Anything else goes to BenchmarkDotNet (e.g. `--filter *PowerFlow*`).
if (args.Length > 0 && args[0] == "versus-reference")
    return VersusRunner.Run(args[1..]);
BenchmarkSwitcher.FromAssembly(typeof(FedGrid.Bench.PowerFlowBenchmarks).Assembly).Run(args);
return 0;
