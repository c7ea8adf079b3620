using Bitbudget.Service.Commands;

namespace Bitbudget.Service.Tests.Demo;

public sealed class DemoCommandTests
{
    [Theory]
    [InlineData("--bogus")]
    [InlineData("--out")]
    [InlineData("--version")]
    [InlineData("--version", "0")]
    [InlineData("--version", "two")]
    public async Task UnknownOrIncompleteArgumentsExitWithUsageCode2(params string[] arguments)
    {
        Assert.Equal(2, await DemoCommand.RunAsync(arguments));
    }

    [Fact]
    public void TheDemoVerbIsRegistered()
    {
        Assert.True(CommandLine.IsCommand(["demo", "--help"]));
    }
}
