using System.Diagnostics;

namespace Bitbudget.Search.Tests.Fuzz;

/// <summary>
/// Runs a target on mutants of a seed corpus for a fixed number of executions. Each execution runs on a worker
/// with a deadline (a hang fails the run) and the bytes it allocates are counted (a run past the bound fails);
/// the target's own refusals (<see cref="EngineException"/>) are expected, any other exception is a finding.
/// </summary>
internal sealed class FuzzRun(string name, IReadOnlyList<byte[]> seeds, Action<byte[]> target)
{
    /// <summary>Longest one execution may take; the loaders take well under a millisecond on these seeds.</summary>
    public static readonly TimeSpan PerInputTimeout = TimeSpan.FromSeconds(10);

    /// <summary>Most bytes one execution may allocate: the targets run under limits far below this.</summary>
    public const long MaxAllocatedBytes = 256L << 20;

    public sealed record Result(int Executions, int Refused, double Seconds, IReadOnlyList<string> Findings)
    {
        public double PerSecond => Executions / Seconds;
    }

    public Result Run(int executions, int seed)
    {
        var mutator = new Mutator(seed);
        var findings = new List<string>();
        var refused = 0;
        var watch = Stopwatch.StartNew();
        for (var i = 0; i < executions && findings.Count < 10; i++)
        {
            var input = i < seeds.Count ? seeds[i] : mutator.Mutate(seeds[i % seeds.Count], seeds[(i * 7 + 3) % seeds.Count]);
            long allocated = 0;
            Exception? error = null;
            var worker = Task.Run(() =>
            {
                var before = GC.GetAllocatedBytesForCurrentThread();
                try
                {
                    target(input);
                }
                catch (Exception e)
                {
                    error = e;
                }

                allocated = GC.GetAllocatedBytesForCurrentThread() - before;
            });
            if (!worker.Wait(PerInputTimeout))
            {
                findings.Add($"{name} #{i}: no answer within {PerInputTimeout.TotalSeconds} s; input {Describe(input)}");
                break;
            }

            if (error is EngineException)
            {
                refused++;
            }
            else if (error is not null)
            {
                findings.Add($"{name} #{i}: {error.GetType().Name}: {error.Message}; input {Describe(input)}\n{error.StackTrace}");
            }

            if (allocated > MaxAllocatedBytes)
            {
                findings.Add($"{name} #{i}: allocated {allocated} bytes for a {input.Length}-byte input; input {Describe(input)}");
            }
        }

        return new Result(executions, refused, watch.Elapsed.TotalSeconds, findings);
    }

    private static string Describe(byte[] input) =>
        $"{input.Length} bytes, SHA-256 {Convert.ToHexStringLower(System.Security.Cryptography.SHA256.HashData(input))}, first bytes {Convert.ToHexString(input.AsSpan(0, Math.Min(48, input.Length)))}";
}
