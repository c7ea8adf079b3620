using Bitbudget.Service.Commands;

namespace Bitbudget.Service.Tests.Demo;

public sealed class DemoCommandTests
{
    [Theory]
    [InlineData("--bogus")]
    [InlineData("--out")]
    public async Task UnknownOrIncompleteArgumentsExitWithUsageCode2(string argument)
    {
        Assert.Equal(2, await DemoCommand.RunAsync([argument]));
    }

    [Fact]
    public void TheDemoVerbIsRegistered()
    {
        Assert.True(CommandLine.IsCommand(["demo", "--help"]));
    }
}
