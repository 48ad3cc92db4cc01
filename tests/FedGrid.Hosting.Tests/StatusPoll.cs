using FedGrid.Hosting.Wire;
using Grpc.Net.Client;

namespace FedGrid.Hosting.Tests;

/// <summary>The one status poll of the hosting tests, for a coordinator in the test process or in its own.</summary>
internal static class StatusPoll
{
    /// <summary>
    /// Polls the coordinator's status on <paramref name="channel"/> until <paramref name="reached"/>. A refused or failed
    /// poll is retried (the coordinator may not take connections yet). When <paramref name="ended"/> says the run is over
    /// first or <paramref name="limit"/> passes, fails with <paramref name="failure"/>'s headline and the last poll error
    /// on the first line, then <paramref name="output"/> (the processes' output or the in-process log).
    /// </summary>
    public static async Task Until(GrpcChannel channel, Func<RunStatus, bool> reached, Func<bool> ended, TimeSpan limit,
        Func<bool, string> failure, Func<string> output)
    {
        var status = new FederationHost.FederationHostClient(channel);
        var watch = System.Diagnostics.Stopwatch.StartNew();
        string? lastError = null;
        while (true)
        {
            try
            {
                if (reached(await status.StatusAsync(new StatusRequest(), deadline: DateTime.UtcNow.AddSeconds(30))))
                {
                    return;
                }
            }
            catch (Grpc.Core.RpcException e)
            {
                lastError = e.Status.ToString();
            }
            bool over = ended();
            if (over || watch.Elapsed > limit)
            {
                throw new TimeoutException($"{failure(over)} (last poll error: {lastError ?? "none"})\n{output()}");
            }
            await Task.Delay(20);
        }
    }
}
