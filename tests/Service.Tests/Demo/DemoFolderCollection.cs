namespace Bitbudget.Service.Tests.Demo;

/// <summary>Lets every demo test class share one generated folder, so the network is trained once per test run (plus once by the determinism test).</summary>
[CollectionDefinition(Name)]
public sealed class DemoFolderCollection : ICollectionFixture<DemoFolderFixture>
{
    public const string Name = "demo folder";
}
