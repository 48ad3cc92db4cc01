using FedGrid.Hosting;
using Grpc.Core;
using Microsoft.Extensions.Logging.Abstractions;

namespace FedGrid.Hosting.Tests;

public sealed class TlsTests : IDisposable
{
    private readonly string _folder = Directory.CreateTempSubdirectory("fedgrid-tls-").FullName;

    public void Dispose() => Directory.Delete(_folder, recursive: true);

    private string Certificates(string name, params string[] ids)
    {
        string f = Path.Combine(_folder, name);
        ScenarioCertificates.Create(f, ids);
        return f;
    }

    [Fact]
    public async Task HouseholdsWithTheirOwnCertificatesRunAndGiveTheInProcessModel()
    {
        HostedRunSettings run = HostedRunTests.Small;
        string tls = Certificates("run", "H01", "H02", "H03");
        await using var c = await TestCoordinator.StartAsync(run, tls: tls);
        var hosts = new[] { "H01", "H02", "H03" }.Select(id => Task.Run(() => new HouseholdHost(run, id, NullLogger.Instance).RunAsync(c.Address, CancellationToken.None, tls))).ToArray();
        CoordinatorOutcome outcome = await c.Run.WaitAsync(TimeSpan.FromMinutes(2));
        await Task.WhenAll(hosts);
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(Convert.ToHexStringLower(run.RunInProcess().ModelSha256), outcome.ModelSha256);
    }

    [Fact]
    public async Task ACertificateNamingAnotherHouseholdIsRefused()
    {
        HostedRunSettings run = HostedRunTests.Small;
        string tls = Certificates("run", "H01", "H02", "H03");
        // H02's gateway presents H01's certificate (copied under its own name): an impersonation.
        string stolen = Path.Combine(_folder, "stolen");
        Directory.CreateDirectory(stolen);
        File.Copy(Path.Combine(tls, ScenarioCertificates.CaFile), Path.Combine(stolen, ScenarioCertificates.CaFile));
        File.Copy(ScenarioCertificates.HouseholdFile(tls, "H01"), ScenarioCertificates.HouseholdFile(stolen, "H02"));
        await using var c = await TestCoordinator.StartAsync(run, tls: tls);
        var e = await Assert.ThrowsAsync<RpcException>(() => new HouseholdHost(run, "H02", NullLogger.Instance).RunAsync(c.Address, CancellationToken.None, stolen));
        Assert.Equal(StatusCode.PermissionDenied, e.StatusCode);
        Assert.True(c.Logged("the client certificate names household 'H01'; the join request claims 'H02'"), string.Join("\n", c.Lines));
    }

    [Fact]
    public async Task ACertificateFromAnotherCaIsRefusedAtTheHandshake()
    {
        HostedRunSettings run = HostedRunTests.Small;
        string tls = Certificates("run", "H01", "H02", "H03");
        string other = Certificates("other", "H01");
        // The household trusts the real coordinator (the run's CA) but presents a certificate of another CA.
        File.Copy(Path.Combine(tls, ScenarioCertificates.CaFile), Path.Combine(other, ScenarioCertificates.CaFile), overwrite: true);
        await using var c = await TestCoordinator.StartAsync(run, tls: tls);
        await AssertRefused(() => new HouseholdHost(run, "H01", NullLogger.Instance).RunAsync(c.Address, CancellationToken.None, other));
        Assert.False(c.Run.IsCompleted); // the coordinator is still waiting for its households
    }

    [Fact]
    public async Task PlainTextClientsCannotReachATlsCoordinator()
    {
        HostedRunSettings run = HostedRunTests.Small;
        string tls = Certificates("run", "H01", "H02", "H03");
        await using var c = await TestCoordinator.StartAsync(run, tls: tls);
        var plain = new Uri(c.Address.ToString().Replace("https://", "http://", StringComparison.Ordinal));
        await AssertRefused(() => new HouseholdHost(run, "H01", NullLogger.Instance).RunAsync(plain, CancellationToken.None));
        Assert.False(c.Run.IsCompleted);
    }

    /// <summary>Depending on when the server drops the connection (handshake or HTTP/2 preface), the client sees either a
    /// non-OK gRPC status or a transport error (HttpIOException is an IOException); either way the household never gets in.</summary>
    private static async Task AssertRefused(Func<Task> join)
    {
        var e = await Assert.ThrowsAnyAsync<Exception>(() => join().WaitAsync(TimeSpan.FromMinutes(2))); // a stuck join fails as a TimeoutException
        Assert.True(e is RpcException { StatusCode: not StatusCode.OK } or IOException or HttpRequestException,
            $"unexpected {e.GetType()}: {e.Message}");
    }

    [Fact]
    public void PlainTextIsRefusedOffLoopback()
    {
        var e = Assert.Throws<ArgumentException>(() => CoordinatorHost.Build(new CoordinatorHostOptions { Run = HostedRunTests.Small },
            System.Net.IPAddress.Parse("10.1.2.3"), 0, tlsFolder: null));
        Assert.Contains("loopback only", e.Message, StringComparison.Ordinal);
    }
}
