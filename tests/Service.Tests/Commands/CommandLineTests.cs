using Bitbudget.Service.Commands;

namespace Bitbudget.Service.Tests.Commands;

public sealed class CommandLineTests
{
    [Fact]
    public void ServeIsStrippedBeforeTheHostSeesTheArguments()
    {
        Assert.Equal(["--urls=http://127.0.0.1:6000"], CommandLine.HostArguments(["serve", "--urls=http://127.0.0.1:6000"]));
        Assert.Equal(["--urls=x"], CommandLine.HostArguments(["--urls=x"]));
        Assert.Empty(CommandLine.HostArguments([]));
    }

    [Fact]
    public void AnUnknownVerbIsNamedAndHostOptionsAreNot()
    {
        Assert.Contains("'srve'", CommandLine.UnknownVerb(["srve"]), StringComparison.Ordinal);
        Assert.Contains("serve", CommandLine.UnknownVerb(["srve"]), StringComparison.Ordinal);
        Assert.Null(CommandLine.UnknownVerb(["serve"]));
        Assert.Null(CommandLine.UnknownVerb(["--Bitbudget:Workers=2"]));
        Assert.Null(CommandLine.UnknownVerb(["Bitbudget:Workers=2"]));
        Assert.Null(CommandLine.UnknownVerb([]));
        Assert.False(CommandLine.IsCommand(["serve"]));
    }
}
