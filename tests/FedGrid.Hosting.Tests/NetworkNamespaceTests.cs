using System.Diagnostics;
using System.Globalization;
using FedGrid.Hosting;

namespace FedGrid.Hosting.Tests;

/// <summary>
/// Households in their own Linux network namespaces, each behind its own veth pair with addresses of the test's own
/// (10.77.b.0/30 blocks, RFC 1918 private space), the coordinator listening on the host side's address with mutual
/// TLS: nothing assumes loopback. Needs root and iproute2 (tests/run.sh installs iproute2 when missing; CI runs as root).
/// </summary>
public sealed class NetworkNamespaceTests
{
    private static string Ip(params string[] args)
    {
        var info = new ProcessStartInfo(IpTool()) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        foreach (string a in args) info.ArgumentList.Add(a);
        using Process p = Process.Start(info)!;
        string output = p.StandardOutput.ReadToEnd() + p.StandardError.ReadToEnd();
        p.WaitForExit();
        if (p.ExitCode != 0) throw new InvalidOperationException($"ip {string.Join(' ', args)} failed ({p.ExitCode}): {output}");
        return output;
    }

    private static string IpTool() =>
        new[] { "/usr/sbin/ip", "/sbin/ip", "/usr/bin/ip", "/bin/ip" }.FirstOrDefault(File.Exists)
        ?? throw new InvalidOperationException("iproute2's ip is not installed (tests/run.sh installs it)");

    [Fact]
    public async Task HouseholdsInTheirOwnNetworkNamespacesGiveTheInProcessModelOverMutualTls()
    {
        Assert.True(Environment.IsPrivilegedProcess, "this test creates network namespaces and needs root (CI runs it as root)");
        HostedRunSettings run = HostedRunTests.Small;
        string[] ids = run.CreateScenario().Households.Select(h => h.Id).ToArray();
        int tag = Environment.ProcessId % 10000, block = Environment.ProcessId % 60 * 4; // distinct names and addresses per test process
        string Ns(int i) => FormattableString.Invariant($"fg{tag}n{i}");
        string HostLink(int i) => FormattableString.Invariant($"fg{tag}h{i}");
        string Net(int i, int host) => FormattableString.Invariant($"10.77.{block + i}.{host}");
        string coordinatorAddress = Net(0, 1);
        string folder = Directory.CreateTempSubdirectory("fedgrid-netns-").FullName;
        var all = new List<HostProcess>();
        try
        {
            for (int i = 0; i < ids.Length; i++)
            {
                Ip("netns", "add", Ns(i));
                Ip("link", "add", HostLink(i), "type", "veth", "peer", "name", "gw0");
                Ip("link", "set", "gw0", "netns", Ns(i));
                Ip("addr", "add", Net(i, 1) + "/30", "dev", HostLink(i));
                Ip("link", "set", HostLink(i), "up");
                Ip("-n", Ns(i), "addr", "add", Net(i, 2) + "/30", "dev", "gw0");
                Ip("-n", Ns(i), "link", "set", "gw0", "up");
                Ip("-n", Ns(i), "link", "set", "lo", "up");
                Ip("-n", Ns(i), "route", "add", "default", "via", Net(i, 1));
            }
            // Inside a namespace there is no route to the host's loopback: the household reaches the coordinator over its veth only.
            Assert.DoesNotContain("127.0.0.1", Ip("-n", Ns(0), "route", "get", coordinatorAddress), StringComparison.Ordinal);

            string tls = Path.Combine(folder, "tls");
            ScenarioCertificates.Create(tls, ids, [coordinatorAddress]);
            var coordinator = HostProcess.Start("coordinator",
            [
                "coordinator", .. run.ToArguments(), "--address", coordinatorAddress, "--port", "0", "--tls", tls,
                "--result", Path.Combine(folder, "result.json"),
            ]);
            all.Add(coordinator);
            await coordinator.WaitForLine("listening on", TimeSpan.FromSeconds(60));
            string listening = coordinator.Line("listening on")!;
            int port = int.Parse(listening[(listening.LastIndexOf(':') + 1)..], CultureInfo.InvariantCulture);
            for (int i = 0; i < ids.Length; i++)
            {
                all.Add(HostProcess.Start(ids[i],
                    ["household", .. run.ToArguments(), "--id", ids[i], "--coordinator", $"https://{coordinatorAddress}:{port}", "--tls", tls],
                    wrapper: [IpTool(), "netns", "exec", Ns(i)]));
            }
            Assert.True(await coordinator.WaitForExit(TimeSpan.FromMinutes(3)) == 0, string.Join("\n", all.Select(p => p.Output())));
            foreach (HostProcess h in all.Skip(1))
            {
                Assert.True(await h.WaitForExit(TimeSpan.FromMinutes(1)) == 0, h.Output());
                Assert.True(h.Logged("finished after 96 steps"), h.Output());
            }
            // Each household came from its own namespace's address.
            for (int i = 0; i < ids.Length; i++)
            {
                Assert.True(coordinator.Logged($"household '{ids[i]}' connected as index {i} from ipv4:{Net(i, 2)}:"), coordinator.Output());
            }
            CoordinatorOutcome outcome = Launcher.ReadOutcome(Path.Combine(folder, "result.json"));
            Assert.True(outcome.Ok, outcome.Error);
            Assert.Equal(Convert.ToHexStringLower(run.RunInProcess().ModelSha256), outcome.ModelSha256);
        }
        finally
        {
            foreach (HostProcess p in all) p.Dispose();
            for (int i = 0; i < ids.Length; i++)
            {
                // Deleting the namespace removes its end of the pair and with it the host end; both are tried in case set-up stopped half-way.
                try { Ip("netns", "del", Ns(i)); } catch (InvalidOperationException) { }
                try { Ip("link", "del", HostLink(i)); } catch (InvalidOperationException) { }
            }
            Directory.Delete(folder, recursive: true);
        }
    }
}
