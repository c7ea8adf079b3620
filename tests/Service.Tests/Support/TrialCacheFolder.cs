using System.Runtime.CompilerServices;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// Points the command line's trial cache (<c>$XDG_CACHE_HOME/bitbudget/trials</c>) at a fresh folder for this test
/// process, so a test never reads trials that an earlier build of the engine wrote into the user's cache.
/// </summary>
internal static class TrialCacheFolder
{
#pragma warning disable CA2255 // A test assembly, not a library: the variable must be set before any test runs a verb.
    [ModuleInitializer]
#pragma warning restore CA2255
    internal static void Isolate() =>
        Environment.SetEnvironmentVariable("XDG_CACHE_HOME", Directory.CreateTempSubdirectory("bitbudget-test-cache-").FullName);
}
