namespace Bitbudget.Service.Tests.Commands;

/// <summary>
/// Tests that swap Console.Out and Console.Error (process-wide) to read what a verb prints. xunit runs
/// a collection with parallelization disabled on its own, after the parallel ones, so no other test
/// writes into the captured streams.
/// </summary>
[CollectionDefinition(Name, DisableParallelization = true)]
public sealed class ConsoleCollection
{
    public const string Name = "Console";
}
