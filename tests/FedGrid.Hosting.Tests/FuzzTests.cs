using FedGrid.Federation.Wire;
using FedGrid.Hosting;
using FedGrid.Hosting.Wire;
using Google.Protobuf;
using Grpc.Core;
using Microsoft.Extensions.Logging.Abstractions;

namespace FedGrid.Hosting.Tests;

public sealed class FuzzTests
{
    private static readonly Marshaller<byte[]> Raw = Marshallers.Create(b => b, b => b);

    // The Session method with raw bytes on the wire, so mutations can break the protobuf encoding itself.
    private static readonly Method<byte[], byte[]> RawSession = new(MethodType.DuplexStreaming, "fedgrid.v1.FederationHost", "Session", Raw, Raw);

    [Fact]
    public async Task TenThousandMalformedOrMutatedMessagesLeaveTheHonestRunUnchanged()
    {
        HostedRunSettings run = HostedRunTests.Small;
        await using var c = await TestCoordinator.StartAsync(run);
        var honest = run.CreateScenario().Households
            .Select(h => Task.Run(() => new HouseholdHost(run, h.Id, NullLogger.Instance).RunAsync(c.Address, CancellationToken.None))).ToArray();
        await c.WaitUntil(s => s.Connected >= run.Households, "every honest household connected");

        const int workers = 4, perWorker = 2500;
        var codes = new Dictionary<StatusCode, int>();
        int answered = 0, duringRun = 0;
        using var channel = c.Channel();
        CallInvoker invoker = channel.CreateCallInvoker();
        await Task.WhenAll(Enumerable.Range(0, workers).Select(w => Task.Run(async () =>
        {
            var rng = new Random(1000 + w); // seeded: the same mutations every run
            for (int i = 0; i < perWorker; i++)
            {
                byte[] bytes = Mutate(rng, i);
                bool running = !c.Run.IsCompleted;
                StatusCode code = await SendRaw(invoker, bytes);
                lock (codes)
                {
                    codes[code] = codes.GetValueOrDefault(code) + 1;
                    answered++;
                    if (running) duringRun++;
                }
            }
        })));

        CoordinatorOutcome outcome = await c.Run.WaitAsync(TimeSpan.FromMinutes(2));
        await Task.WhenAll(honest).WaitAsync(TimeSpan.FromMinutes(1));
        Assert.Equal(workers * perWorker, answered);
        // Every malformed message was refused: no fuzz call ended OK with an admission (OK here means only "empty message stream").
        Assert.True(codes.GetValueOrDefault(StatusCode.OK) == 0, string.Join(", ", codes.Select(kv => $"{kv.Key}={kv.Value}")));
        Assert.True(codes.GetValueOrDefault(StatusCode.InvalidArgument) > 1000, string.Join(", ", codes.Select(kv => $"{kv.Key}={kv.Value}")));
        Assert.True(duringRun > 0, "the fuzz should overlap the honest run");
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(Convert.ToHexStringLower(run.RunInProcess().ModelSha256), outcome.ModelSha256);
    }

    private static async Task<StatusCode> SendRaw(CallInvoker invoker, byte[] bytes)
    {
        using var call = invoker.AsyncDuplexStreamingCall(RawSession, null, new CallOptions(deadline: DateTime.UtcNow.AddSeconds(20)));
        try
        {
            await call.RequestStream.WriteAsync(bytes);
            await call.RequestStream.CompleteAsync();
        }
        catch (Exception e) when (e is RpcException or InvalidOperationException or IOException)
        {
            // ended by the coordinator while writing, or the stream reset by Kestrel's HTTP/2 flood protection
            // (ENHANCE_YOUR_CALM on the fuzzing connection: the honest households have their own connections)
        }
        try
        {
            while (await call.ResponseStream.MoveNext())
            {
                throw new InvalidOperationException("a fuzz session received a coordinator message");
            }
            return StatusCode.OK;
        }
        catch (RpcException e)
        {
            return e.StatusCode;
        }
        catch (IOException)
        {
            return StatusCode.Unavailable; // the fuzzing connection reset by the server
        }
    }

    /// <summary>A malformed or mutated household message: semantic corruptions of valid messages, or broken encodings.</summary>
    private static byte[] Mutate(Random rng, int i)
    {
        HouseholdMessage m = Template(rng);
        switch (i % 8)
        {
            case 0: // a non-finite value somewhere
                Corrupt(m, rng, rng.Next(3) switch { 0 => float.NaN, 1 => float.PositiveInfinity, _ => float.NegativeInfinity });
                break;
            case 1: // an absurd magnitude
                Corrupt(m, rng, (rng.Next(2) * 2 - 1) * (float)Math.Pow(10, rng.Next(7, 38)));
                break;
            case 2: // a wrong-length vector
                if (m.BodyCase == HouseholdMessage.BodyOneofCase.PartialSums)
                {
                    if (rng.Next(2) == 0) m.PartialSums.Actor.RemoveAt(0); else m.PartialSums.Critic.Add(0.1f);
                }
                else
                {
                    m.PartialSums = new PartialSums { Actor = { 1f } };
                }
                break;
            case 3: // impersonation, replay, out of order: valid-looking values, wrong index, round or step
                m.HouseholdIndex = rng.Next(-3, 10);
                if (m.BodyCase == HouseholdMessage.BodyOneofCase.PartialSums)
                {
                    m.PartialSums.Round = rng.Next(0, 5);
                    m.PartialSums.Step = rng.Next(-5, 200);
                }
                break;
            case 4: // joins: duplicates of honest ids, unknown ids, bad tan phi
                m = new HouseholdMessage
                {
                    HouseholdIndex = -1,
                    Join = new JoinRequest
                    {
                        HouseholdId = rng.Next(3) == 0 ? $"H{rng.Next(1, 4):00}" : $"X{rng.Next(1000)}",
                        ProtocolVersion = (uint)rng.Next(0, 3),
                        FeatureCount = rng.Next(10, 16),
                        BusId = "B02",
                        TanPhi = rng.Next(4) == 0 ? double.NaN : rng.NextDouble(),
                    },
                };
                break;
            case 5: // no body
                m = new HouseholdMessage { HouseholdIndex = rng.Next(3) };
                break;
            default:
                break;
        }
        byte[] bytes = m.ToByteArray();
        switch (i % 8)
        {
            case 6: // flipped bits
                for (int k = rng.Next(1, 6); k > 0 && bytes.Length > 0; k--) bytes[rng.Next(bytes.Length)] ^= (byte)(1 << rng.Next(8));
                if (Decodes(bytes) is { } d && d.BodyCase == HouseholdMessage.BodyOneofCase.PartialSums) Corrupt(d, rng, float.NaN, bytes: ref bytes);
                break;
            case 7: // truncated or garbage
                bytes = rng.Next(2) == 0 ? bytes[..rng.Next(Math.Max(1, bytes.Length))] : RandomBytes(rng);
                if (Decodes(bytes) is { BodyCase: HouseholdMessage.BodyOneofCase.PartialSums } t) Corrupt(t, rng, float.NaN, bytes: ref bytes);
                break;
        }
        return bytes;
    }

    private static byte[] RandomBytes(Random rng)
    {
        var b = new byte[rng.Next(1, 300)];
        rng.NextBytes(b);
        return b;
    }

    private static HouseholdMessage? Decodes(byte[] bytes)
    {
        try
        {
            return HouseholdMessage.Parser.ParseFrom(bytes);
        }
        catch (InvalidProtocolBufferException)
        {
            return null;
        }
    }

    // Keeps a still-decodable partial sums message malformed (a flipped bit could by chance leave it valid-looking).
    private static void Corrupt(HouseholdMessage m, Random rng, float value, ref byte[] bytes)
    {
        Corrupt(m, rng, value);
        bytes = m.ToByteArray();
    }

    private static void Corrupt(HouseholdMessage m, Random rng, float value)
    {
        switch (m.BodyCase)
        {
            case HouseholdMessage.BodyOneofCase.PartialSums:
                var v = rng.Next(2) == 0 ? m.PartialSums.Actor : m.PartialSums.Critic;
                if (v.Count == 0) v.Add(value); else v[rng.Next(v.Count)] = value;
                break;
            case HouseholdMessage.BodyOneofCase.ProjectionInputs:
                m.ProjectionInputs.ProposalKw = value;
                break;
            case HouseholdMessage.BodyOneofCase.Upload:
                m.Upload.ActorParameters.Add(value);
                break;
            default:
                m.PartialSums = new PartialSums { Actor = { value } };
                break;
        }
    }

    private static HouseholdMessage Template(Random rng)
    {
        var sums = new PartialSums { Round = 0, Step = rng.Next(0, 96) };
        for (int k = 0; k < 64; k++)
        {
            sums.Actor.Add((float)(rng.NextDouble() - 0.5));
            sums.Critic.Add((float)(rng.NextDouble() - 0.5));
        }
        return rng.Next(3) switch
        {
            0 => new HouseholdMessage { HouseholdIndex = rng.Next(3), PartialSums = sums },
            1 => new HouseholdMessage
            {
                HouseholdIndex = rng.Next(3),
                ProjectionInputs = new ProjectionInputs { Round = 0, Step = sums.Step, ProposalKw = 1.5, FlexMinKw = 0.5, FlexMaxKw = 3, BaseKw = 0.4 },
            },
            _ => new HouseholdMessage
            {
                HouseholdIndex = rng.Next(3),
                Upload = new ParameterUpload { Round = rng.Next(0, 4), SampleCount = 24, Scope = ParameterScope.OwnColumnsAndShared, ActorParameters = { 0.1f, 0.2f }, CriticParameters = { 0.3f } },
            },
        };
    }
}
